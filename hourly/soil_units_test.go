package hourly

import "testing"

// TestSoilProbeUnits checks the probe quantities' units: 1 m3/m3 is 100 %
// by volume and 1 cbar is 1 kPa (definitions of the units).
func TestSoilProbeUnits(t *testing.T) {
	for _, c := range []struct {
		q    Quantity
		unit string
		v    float64
		want float64
	}{
		{SoilWater, "%", 23.5, 23.5},
		{SoilWater, "m3/m3", 0.235, 23.5},
		{SoilTension, "kPa", 33, 33},
		{SoilTension, "cbar", 33, 33},
		{SoilTension, "hPa", 330, 33},
	} {
		got, err := ToCanonical(c.q, c.unit, c.v)
		if err != nil {
			t.Fatalf("%s %v %s: %v", c.q, c.v, c.unit, err)
		}
		if d := got - c.want; d > 1e-9 || d < -1e-9 {
			t.Errorf("%s %v %s = %v, want %v", c.q, c.v, c.unit, got, c.want)
		}
	}
	if _, err := ToCanonical(SoilWater, "kPa", 1); err == nil {
		t.Error("soil water in kPa: want a unit error")
	}
}
