package hourly

import (
	"math"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// A prepared station computes exactly what the bare one does: Prepared only
// hoists FAO-56 eq. 7 out of the per-hour path.
func TestPreparedStationSameResult(t *testing.T) {
	st := ex19
	bare, _, err := Compute(st, FAO56, ex19Day(), Carry{})
	require.NoError(t, err)
	prepared, _, err := Compute(st.Prepared(), FAO56, ex19Day(), Carry{})
	require.NoError(t, err)
	assert.Equal(t, bare, prepared)
	assert.InDelta(t, 101.2, st.Prepared().Pressure, 0.05, "FAO-56 Example 19, P at 8 m (from memory)")
}

// A measured station pressure replaces eq. 7 and flows into γ (FAO-56 eq. 8).
func TestGivenStationPressure(t *testing.T) {
	st := ex19
	st.Pressure = 90
	r, _, err := Compute(st, Short, ex19Day(), Carry{})
	require.NoError(t, err)
	assert.Equal(t, 90.0, r.Pressure)
	assert.InDelta(t, 0.665e-3*90, r.Gamma, 1e-12)

	st.Pressure = 12
	_, _, err = Compute(st, Short, ex19Day(), Carry{})
	require.ErrorIs(t, err, ErrConfig)
	assert.Contains(t, err.Error(), "station pressure: 12 kPa outside 30..110")
}

// TestStationLimits: Station.Validate and WindFactor accept each declared
// bound exactly and refuse the next value outside it, so the limits the
// configuration and the calc flags translate are the ones the equations
// enforce.
func TestStationLimits(t *testing.T) {
	below := func(v float64) float64 { return math.Nextafter(v, math.Inf(-1)) }
	above := func(v float64) float64 { return math.Nextafter(v, math.Inf(1)) }
	for _, c := range []struct {
		name   string
		set    func(*Station, float64)
		lo, hi float64
	}{
		{"latitude", func(s *Station, v float64) { s.Latitude = v }, MinLatitude, MaxLatitude},
		{"longitude", func(s *Station, v float64) { s.Longitude = v }, MinLongitude, MaxLongitude},
		{"elevation", func(s *Station, v float64) { s.Elevation = v }, MinElevation, MaxElevation},
		{"utc offset", func(s *Station, v float64) { s.UTCOffset = v }, MinUTCOffset, MaxUTCOffset},
		{"turbidity", func(s *Station, v float64) { s.Turbidity = v }, MinTurbidity, MaxTurbidity},
		{"minimum wind", func(s *Station, v float64) { s.MinWind2 = v }, 0, MaxMinWind2},
	} {
		for _, v := range []float64{c.lo, c.hi} {
			st := ex19
			c.set(&st, v)
			assert.NoError(t, st.Validate(), "%s %v is a bound", c.name, v)
		}
		for _, v := range []float64{below(c.lo), above(c.hi)} {
			st := ex19
			c.set(&st, v)
			assert.ErrorIs(t, st.Validate(), ErrConfig, "%s %v is outside", c.name, v)
		}
	}
	for _, z := range []float64{MinWindHeight, MaxWindHeight} {
		_, err := WindFactor(z)
		assert.NoError(t, err, "wind height %v is a bound", z)
	}
	for _, z := range []float64{below(MinWindHeight), above(MaxWindHeight)} {
		_, err := WindFactor(z)
		assert.ErrorIs(t, err, ErrInput, "wind height %v is outside", z)
	}
	// Turbidity 0 means the default 1.0 and stays accepted.
	st := ex19
	st.Turbidity = 0
	assert.NoError(t, st.Validate())
}
