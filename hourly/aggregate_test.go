package hourly

import (
	"fmt"
	"math"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

var hourStart = time.Date(2026, 7, 1, 13, 0, 0, 0, time.UTC)

// minuteSamples returns one sample per step minutes over the first n minutes
// of the hour, valued by f(minute).
func minuteSamples(sensor string, q Quantity, step, n int, f func(m int) float64) []Sample {
	var out []Sample
	for m := 0; m < n; m += step {
		out = append(out, Sample{Sensor: sensor, Quantity: q, Time: hourStart.Add(time.Duration(m) * time.Minute), Value: f(m)})
	}
	return out
}

// fullHour is a complete hour: air temperature rising 20->31 degC, RH
// falling 70->48 %, wind 3 m/s at 2 m, solar 600 W/m2, all every 5 minutes.
func fullHour() []Sample {
	var s []Sample
	s = append(s, minuteSamples("t1", AirTemp, 5, 60, func(m int) float64 { return 20 + float64(m)/5 })...)
	s = append(s, minuteSamples("h1", RelHumidity, 5, 60, func(m int) float64 { return 70 - float64(m)*0.4 })...)
	s = append(s, minuteSamples("a1", Wind, 5, 60, func(int) float64 { return 3 })...)
	s = append(s, minuteSamples("p1", Solar, 5, 60, func(int) float64 { return 600 })...)
	return s
}

func TestAggregateHourComplete(t *testing.T) {
	a, err := AggregateHour(hourStart, fullHour(), AggregateOptions{MinCoverage: 0.75})
	require.NoError(t, err)
	assert.True(t, a.Complete(), "missing %v", a.Missing)
	assert.Empty(t, a.Rejected)
	assert.Equal(t, hourStart, a.Hour.Start)
	assert.Equal(t, time.Hour, a.Hour.Length)
	assert.InDelta(t, 25.5, a.Hour.AirTemp, 1e-12)
	assert.Equal(t, 3.0, a.Hour.Wind2)
	assert.InDelta(t, 600*0.0036, a.Hour.Solar, 1e-12) // 2.16 MJ m-2 h-1
	assert.Equal(t, RelHumidity, a.Humidity)

	// ea is the mean of per-sample ea (FAO-56 eq. 54 per sample), not e°(mean T) x mean RH.
	var want float64
	for m := 0; m < 60; m += 5 {
		want += SatVapourPressure(20+float64(m)/5) * (70 - float64(m)*0.4) / 100
	}
	want /= 12
	assert.InDelta(t, want, a.Hour.Ea, 1e-12)
	naive := SatVapourPressure(25.5) * a.Stats[RelHumidity].Mean / 100
	assert.Greater(t, math.Abs(naive-a.Hour.Ea), 0.005, "the naive mean-RH form must differ for this test to mean anything")

	st := a.Stats[AirTemp]
	assert.Equal(t, Stats{Count: 12, Min: 20, Max: 31, Mean: 25.5, Coverage: 1}, st)

	res, _, err := Compute(Station{Latitude: 38.5, Longitude: -121.7, Elevation: 20, UTCOffset: -8}, Short, a.Hour, Carry{})
	require.NoError(t, err)
	assert.Greater(t, res.ET, 0.0)
}

func TestAggregateHourPairsRHWithNearestTemperature(t *testing.T) {
	// Temperature every 10 minutes, RH at 4, 16, 29 minutes: each RH pairs
	// with the temperature at 0, 20, 30 minutes.
	temps := minuteSamples("t1", AirTemp, 10, 60, func(m int) float64 { return 10 + float64(m) })
	rh := []Sample{
		{Sensor: "h1", Quantity: RelHumidity, Time: hourStart.Add(4 * time.Minute), Value: 50},
		{Sensor: "h1", Quantity: RelHumidity, Time: hourStart.Add(16 * time.Minute), Value: 60},
		{Sensor: "h1", Quantity: RelHumidity, Time: hourStart.Add(29 * time.Minute), Value: 80},
	}
	a, err := AggregateHour(hourStart, append(rh, temps...), AggregateOptions{})
	require.NoError(t, err)
	want := (SatVapourPressure(10)*0.5 + SatVapourPressure(30)*0.6 + SatVapourPressure(40)*0.8) / 3
	assert.InDelta(t, want, a.Hour.Ea, 1e-12)
	assert.Equal(t, []Quantity{Wind, Solar}, a.Missing)
}

func TestAggregateHourHumidityPreference(t *testing.T) {
	base := fullHour()
	dew := minuteSamples("d1", DewPoint, 5, 60, func(int) float64 { return 12 })
	vp := minuteSamples("v1", VapourPressure, 5, 60, func(int) float64 { return 1.1 })

	a, err := AggregateHour(hourStart, append(append([]Sample{}, base...), dew...), AggregateOptions{MinCoverage: 0.5})
	require.NoError(t, err)
	assert.Equal(t, DewPoint, a.Humidity)
	assert.InDelta(t, SatVapourPressure(12), a.Hour.Ea, 1e-12) // FAO-56 eq. 14

	a, err = AggregateHour(hourStart, append(append(append([]Sample{}, base...), dew...), vp...), AggregateOptions{MinCoverage: 0.5})
	require.NoError(t, err)
	assert.Equal(t, VapourPressure, a.Humidity)
	assert.InDelta(t, 1.1, a.Hour.Ea, 1e-12)

	// A vapour-pressure sensor that covers too little of the hour gives way
	// to dew point.
	a, err = AggregateHour(hourStart, append(append(append([]Sample{}, base...), dew...), vp[:2]...), AggregateOptions{MinCoverage: 0.5})
	require.NoError(t, err)
	assert.Equal(t, DewPoint, a.Humidity)
}

func TestAggregateHourCoverage(t *testing.T) {
	var s []Sample
	s = append(s, minuteSamples("t1", AirTemp, 1, 60, func(int) float64 { return 20 })...)
	s = append(s, minuteSamples("h1", RelHumidity, 1, 30, func(int) float64 { return 50 })...) // first half only
	s = append(s, minuteSamples("a1", Wind, 20, 60, func(int) float64 { return 2 })...)        // 3 slots
	a, err := AggregateHour(hourStart, s, AggregateOptions{MinCoverage: 0.5})
	require.NoError(t, err)
	assert.Equal(t, 1.0, a.Stats[AirTemp].Coverage)
	assert.Equal(t, 60, a.Stats[AirTemp].Count)
	assert.Equal(t, 0.5, a.Stats[RelHumidity].Coverage)
	assert.Equal(t, 0.25, a.Stats[Wind].Coverage)
	assert.Equal(t, []Quantity{Wind, Solar}, a.Missing)
	assert.False(t, a.Complete())
	assert.Zero(t, a.Hour.Wind2, "a missing quantity is not filled")

	a, err = AggregateHour(hourStart, nil, AggregateOptions{})
	require.NoError(t, err)
	assert.Equal(t, []Quantity{AirTemp, RelHumidity, Wind, Solar}, a.Missing)
	assert.Empty(t, a.Stats)

	dewOnly := minuteSamples("d1", DewPoint, 30, 60, func(int) float64 { return 5 })
	a, err = AggregateHour(hourStart, dewOnly, AggregateOptions{MinCoverage: 0.5})
	require.NoError(t, err)
	assert.Contains(t, a.Missing, DewPoint, "the humidity quantity present is the one reported missing")
}

func TestAggregateHourDuplicatesAndBadSamples(t *testing.T) {
	s := fullHour()
	dup := s[0]
	dup.Value = 30 // same sensor, quantity and time: dropped
	other := s[0]
	other.Sensor = "t2" // another thermometer at the same instant: kept
	other.Value = 21
	sameSensorOtherQuantity := Sample{Sensor: "t1", Quantity: RelHumidity, Time: s[0].Time, Value: 70}
	s = append(s, dup, other, sameSensorOtherQuantity,
		Sample{Sensor: "t1", Quantity: AirTemp, Time: hourStart.Add(-time.Second), Value: 20},
		Sample{Sensor: "t1", Quantity: AirTemp, Time: hourStart.Add(time.Hour), Value: 20},
		Sample{Sensor: "t1", Quantity: AirTemp, Time: hourStart.Add(time.Minute), Value: math.NaN()},
		Sample{Sensor: "t1", Quantity: AirTemp, Time: hourStart.Add(time.Minute), Value: 812},
		Sample{Sensor: "h1", Quantity: RelHumidity, Time: hourStart.Add(time.Minute), Value: 120},
		Sample{Sensor: "h1", Quantity: RelHumidity, Time: hourStart.Add(2 * time.Minute), Value: 102},
		Sample{Sensor: "a1", Quantity: Wind, Time: hourStart.Add(time.Minute), Value: -1},
		Sample{Sensor: "x", Quantity: "leaf_wetness", Time: hourStart, Value: 1},
	)
	a, err := AggregateHour(hourStart, s, AggregateOptions{MinCoverage: 0.75})
	require.NoError(t, err)
	assert.Equal(t, 1, a.Duplicates)
	assert.Equal(t, 13, a.Stats[AirTemp].Count)
	assert.InDelta(t, (25.5*12+21)/13, a.Hour.AirTemp, 1e-12)
	assert.Equal(t, 14, a.Stats[RelHumidity].Count)
	assert.Equal(t, 100.0, a.Stats[RelHumidity].Max, "102 % clamped to 100 %")
	require.Len(t, a.Rejected, 7)
	for _, e := range a.Rejected {
		assert.ErrorIs(t, e, ErrInput)
	}
	msgs := fmt.Sprint(a.Rejected)
	assert.Contains(t, msgs, "outside hour")
	assert.Contains(t, msgs, "air_temp from \"t1\" at 2026-07-01T13:01:00Z: NaN degC")
	assert.Contains(t, msgs, "812 degC outside -90..65")
	assert.Contains(t, msgs, "120 % outside -3..103")
	assert.Contains(t, msgs, "wind from \"a1\" at 2026-07-01T13:01:00Z: -1 m/s")
	assert.Contains(t, msgs, "leaf_wetness")
	assert.True(t, a.Complete())
}

func TestAggregateHourSolarRainFluxesWind(t *testing.T) {
	var s []Sample
	s = append(s, minuteSamples("t1", AirTemp, 5, 60, func(int) float64 { return 15 })...)
	s = append(s, minuteSamples("v1", VapourPressure, 5, 60, func(int) float64 { return 1.2 })...)
	s = append(s, minuteSamples("a1", Wind, 5, 60, func(int) float64 { return 4 })...)
	// Night pyranometer offsets: -4 W/m2 half the hour, 8 W/m2 the other half.
	s = append(s, minuteSamples("p1", Solar, 5, 60, func(m int) float64 {
		if m < 30 {
			return -4
		}
		return 8
	})...)
	s = append(s, minuteSamples("r1", Rain, 10, 60, func(int) float64 { return 0.2 })...)
	s = append(s, minuteSamples("n1", NetRad, 5, 60, func(int) float64 { return -50 })...)
	s = append(s, minuteSamples("g1", SoilHeat, 5, 60, func(int) float64 { return -20 })...)

	a, err := AggregateHour(hourStart, s, AggregateOptions{WindHeight: 10, MinCoverage: 1})
	require.NoError(t, err)
	assert.True(t, a.Complete())
	assert.InDelta(t, 4*4.87/math.Log(67.8*10-5.42), a.Hour.Wind2, 1e-12) // FAO-56 eq. 47
	assert.InDelta(t, 4*0.0036, a.Hour.Solar, 1e-12, "negative offsets count as zero")
	assert.Equal(t, -4.0, a.Stats[Solar].Min, "raw values kept in Stats")
	assert.InDelta(t, 2.0, a.Stats[Solar].Mean, 1e-12)
	assert.InDelta(t, 1.2, a.Rain, 1e-12)
	assert.True(t, a.Hour.HasNetRad)
	assert.InDelta(t, -0.18, a.Hour.NetRad, 1e-12)
	assert.True(t, a.Hour.HasSoilHeat)
	assert.InDelta(t, -0.072, a.Hour.SoilHeat, 1e-12)
}

func TestAggregateHourRejectsBadOptions(t *testing.T) {
	_, err := AggregateHour(hourStart, nil, AggregateOptions{MinCoverage: 1.5})
	assert.ErrorIs(t, err, ErrConfig)
	assert.ErrorContains(t, err, "min coverage: 1.5 outside 0..1")
	_, err = AggregateHour(hourStart, nil, AggregateOptions{WindHeight: -3})
	assert.ErrorIs(t, err, ErrConfig)
	assert.ErrorContains(t, err, "wind height: -3 m")
}
