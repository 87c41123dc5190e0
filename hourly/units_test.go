package hourly

import (
	"math"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestToCanonical checks each accepted unit against definitional values
// (from memory: 0 degC = 32 degF = 273.15 K; 1 mph = 0.44704 m/s; 1 knot =
// 1852 m/h; 1 in = 25.4 mm; 1 W m-2 over an hour = 0.0036 MJ m-2, FAO-56
// ch. 3 conversion factors).
func TestToCanonical(t *testing.T) {
	cases := []struct {
		q    Quantity
		unit string
		in   float64
		want float64
	}{
		{AirTemp, "degC", 21.5, 21.5},
		{AirTemp, "degF", 212, 100},
		{AirTemp, "degF", -40, -40},
		{DewPoint, "K", 273.15, 0},
		{RelHumidity, "%", 55, 55},
		{RelHumidity, "fraction", 0.55, 55},
		{VapourPressure, "kPa", 1.2, 1.2},
		{VapourPressure, "hPa", 1013.25, 101.325},
		{VapourPressure, "Pa", 2338, 2.338},
		{Wind, "m/s", 3, 3},
		{Wind, "km/h", 36, 10},
		{Wind, "mph", 10, 4.4704},
		{Wind, "knots", 10, 5.144444444444445},
		{Solar, "W/m2", 800, 800},
		{Solar, "MJ/m2/h", 2.45, 2.45 / 0.0036},
		{NetRad, "W/m2", -40, -40},
		{SoilHeat, "MJ/m2/h", -0.036, -10},
		{Rain, "mm", 1.2, 1.2},
		{Rain, "in", 0.5, 12.7},
	}
	for _, c := range cases {
		got, err := ToCanonical(c.q, c.unit, c.in)
		require.NoError(t, err, "%s %s", c.q, c.unit)
		assert.InDelta(t, c.want, got, 1e-9, "%v %s %s", c.in, c.unit, c.q)
	}
}

func TestToCanonicalErrors(t *testing.T) {
	_, err := ToCanonical(AirTemp, "degK", 300)
	assert.ErrorIs(t, err, ErrUnit)
	assert.EqualError(t, err, `convert unit: air_temp: unit "degK" is not one of [degC degF K]: unknown unit`)
	_, err = ToCanonical("leaf_wetness", "%", 3)
	assert.ErrorIs(t, err, ErrUnit)
	_, err = ToCanonical(Wind, "mph", math.NaN())
	assert.ErrorIs(t, err, ErrInput)
	assert.NoError(t, CheckUnit(Rain, "in"))
	assert.ErrorIs(t, CheckUnit(Rain, "cm"), ErrUnit)
}

func TestUnitsFor(t *testing.T) {
	for _, q := range Quantities {
		units := UnitsFor(q)
		require.NotEmpty(t, units, "%s", q)
		assert.Equal(t, CanonicalUnit(q), units[0], "canonical unit first for %s", q)
		for _, u := range units {
			assert.NoError(t, CheckUnit(q, u))
		}
	}
	assert.Nil(t, UnitsFor("leaf_wetness"))
	assert.Empty(t, CanonicalUnit("leaf_wetness"))
	// The slice is the caller's.
	UnitsFor(AirTemp)[0] = "x"
	assert.Equal(t, "degC", UnitsFor(AirTemp)[0])
}

func TestConversionRoundTrips(t *testing.T) {
	for _, v := range []float64{-40, 0, 12.34, 100} {
		assert.InDelta(t, v, FahrenheitToCelsius(CelsiusToFahrenheit(v)), 1e-12)
		assert.InDelta(t, v, KelvinToCelsius(CelsiusToKelvin(v)), 1e-12)
		assert.InDelta(t, v, KPaToHPa(HPaToKPa(v)), 1e-12)
		assert.InDelta(t, v, MMToInches(InchesToMM(v)), 1e-12)
		assert.InDelta(t, v, MJToWatts(WattsToMJ(v, 0.25), 0.25), 1e-12)
	}
	assert.InDelta(t, 1.0, KnotsToMS(1)/MphToMS(1.150779), 1e-6) // 1 knot = 1.150779 mph (from memory)
}

// TestWindFactor checks FAO-56 eq. 47 (Example 14: 3.2 m/s at 10 m -> 2.4,
// in fao56_scalar.csv) and its accepted heights.
func TestWindFactor(t *testing.T) {
	f, err := WindFactor(2)
	require.NoError(t, err)
	assert.Equal(t, 1.0, f)
	f, err = WindFactor(10)
	require.NoError(t, err)
	assert.InDelta(t, 0.748, f, 0.0005) // FAO-56 Annex 2 Table 2.9, 10 m (from memory; eq. 47)
	for _, z := range []float64{0, 0.3, -2, 150, math.NaN()} {
		_, err := WindAt2m(3, z)
		assert.ErrorIs(t, err, ErrInput, "z=%v", z)
	}
}
