package quality

import (
	"math"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/alert"
	"etpulse/gateway/config"
	"etpulse/hourly"
)

// find returns the finding of kind on quantity q, and whether there is one.
func find(fs []Finding, k alert.Kind, q hourly.Quantity) (Finding, bool) {
	for _, f := range fs {
		if f.Kind == k && f.Quantity == q {
			return f, true
		}
	}
	return Finding{}, false
}

// runWindow evaluates the checks after every hour of w, as the monitor does,
// and returns for each hour the findings of kind k on q.
func runWindow(cfg *config.Alerts, choices config.StationAlerts, w []HourObs, k alert.Kind, q hourly.Quantity) []Finding {
	var out []Finding
	for i := 1; i <= len(w); i++ {
		if f, ok := find(HourChecks("brackenfold", "orchard", cfg, choices, w[:i]), k, q); ok {
			out = append(out, f)
		}
	}
	return out
}

func statuses(fs []Finding) (bad, good int) {
	for _, f := range fs {
		switch f.Status {
		case StatusBad:
			bad++
		case StatusGood:
			good++
		}
	}
	return bad, good
}

func TestSolarEnvelopeLowSensor(t *testing.T) {
	cfg := testAlerts()
	// A dome losing a quarter of its signal: clear days reach Rs/Rso ≈ 0.98 x 0.75.
	w := weather{solarScale: 0.75}.hours(8 * 24)
	fs := runWindow(cfg, config.StationAlerts{}, w, alert.KindSolarLow, hourly.Solar)
	last := fs[len(fs)-1]
	require.Equal(t, StatusBad, last.Status, last.Message)
	assert.InDelta(t, 0.735, last.Value, 0.02)
	assert.Contains(t, last.Message, "max daily Rs/Rso over the last 7 days 0.7")
	assert.Contains(t, last.Message, "expected >= 0.85")

	// The same sky seen by a clean sensor: no alarm at any hour.
	w = weather{}.hours(8 * 24)
	bad, good := statuses(runWindow(cfg, config.StationAlerts{}, w, alert.KindSolarLow, hourly.Solar))
	assert.Zero(t, bad)
	assert.Positive(t, good)
}

func TestSolarEnvelopeNoFalseAlarmOnCloudyWeek(t *testing.T) {
	cfg := testAlerts()
	// Broken cloud all week and an overcast day: the largest daily Rs/Rso is
	// far below 0.85 but no day looks clear, so there is no evidence.
	for seed := uint64(1); seed <= 5; seed++ {
		w := weather{clearness: cloudyWeek(seed)}.hours(8 * 24)
		fs := runWindow(cfg, config.StationAlerts{}, w, alert.KindSolarLow, hourly.Solar)
		bad, _ := statuses(fs)
		assert.Zero(t, bad, "seed %d", seed)
		assert.Less(t, fs[len(fs)-1].Value, 0.85, "the week is really cloudy")
	}
	// Uniform overcast all week: steady hourly ratio but too low to look clear.
	w := weather{clearness: func(int, int) float64 { return 0.3 }}.hours(8 * 24)
	bad, _ := statuses(runWindow(cfg, config.StationAlerts{}, w, alert.KindSolarLow, hourly.Solar))
	assert.Zero(t, bad)
}

func TestSolarEnvelopeClearsWithHysteresis(t *testing.T) {
	cfg := testAlerts()
	w := weather{solarScale: 0.75}.hours(8 * 24)
	// The dome is cleaned: from day 8 the sensor reads right again.
	w = append(w, weather{}.hours(10 * 24)[8*24:]...)
	fs := runWindow(cfg, config.StationAlerts{}, w, alert.KindSolarLow, hourly.Solar)
	var seenBad bool
	var lastStatus Status
	for _, f := range fs {
		if f.Status == StatusBad {
			seenBad = true
		}
		lastStatus = f.Status
	}
	assert.True(t, seenBad)
	assert.Equal(t, StatusGood, lastStatus)
}

func TestSolarEnvelopeHighSensor(t *testing.T) {
	cfg := testAlerts()
	w := weather{solarScale: 1.35}.hours(3 * 24)
	fs := runWindow(cfg, config.StationAlerts{}, w, alert.KindSolarHigh, hourly.Solar)
	last := fs[len(fs)-1]
	require.Equal(t, StatusBad, last.Status)
	assert.Contains(t, last.Message, "expected <= 1.10")
	assert.InDelta(t, 1.32, last.Value, 0.03)

	bad, good := statuses(runWindow(cfg, config.StationAlerts{}, weather{}.hours(3*24), alert.KindSolarHigh, hourly.Solar))
	assert.Zero(t, bad)
	assert.Positive(t, good)
}

func TestNightSolarOffset(t *testing.T) {
	cfg := testAlerts()
	fs := runWindow(cfg, config.StationAlerts{}, weather{nightSolar: 35}.hours(2*24), alert.KindNightSolar, hourly.Solar)
	bad, _ := statuses(fs)
	require.Positive(t, bad)
	for _, f := range fs {
		if f.Status == StatusBad {
			assert.Contains(t, f.Message, "expected <= 10 W/m2")
		}
	}
	// A normal thermopile offset of a few W m-2 below zero is no fault.
	bad, good := statuses(runWindow(cfg, config.StationAlerts{}, weather{nightSolar: -4}.hours(2*24), alert.KindNightSolar, hourly.Solar))
	assert.Zero(t, bad)
	assert.Positive(t, good)
}

func TestStuckAirTemperature(t *testing.T) {
	cfg := testAlerts()
	w := weather{tempStuck: ptr(21.3), stuckFrom: 30}.hours(40)
	fs := runWindow(cfg, config.StationAlerts{}, w, alert.KindStuck, hourly.AirTemp)
	last := fs[len(fs)-1]
	require.Equal(t, StatusBad, last.Status)
	assert.Equal(t, 10.0, last.Value)
	assert.Contains(t, last.Message, "air_temp stuck at 21.3 for 10 hours")
	// First bad verdict exactly when the limit (4 h) is reached.
	for i, f := range fs {
		if f.Status == StatusBad {
			assert.Equal(t, 30+4-1, i)
			break
		}
	}
	bad, _ := statuses(runWindow(cfg, config.StationAlerts{}, weather{}.hours(3*24), alert.KindStuck, hourly.AirTemp))
	assert.Zero(t, bad)
}

func TestStuckWindCountsDaytimeOnly(t *testing.T) {
	cfg := testAlerts()
	// Calm nights (exactly 0 m/s all night) are no fault.
	bad, _ := statuses(runWindow(cfg, config.StationAlerts{}, weather{windNight: 0}.hours(3*24), alert.KindStuck, hourly.Wind))
	assert.Zero(t, bad)
	// A cup stuck at 1.2 m/s all day is.
	fs := runWindow(cfg, config.StationAlerts{}, weather{windStuck: ptr(1.2)}.hours(2*24), alert.KindStuck, hourly.Wind)
	bad, _ = statuses(fs)
	assert.Positive(t, bad)
}

func TestCalmRun(t *testing.T) {
	cfg := testAlerts()
	fs := runWindow(cfg, config.StationAlerts{}, weather{windStuck: ptr(0.0)}.hours(3*24), alert.KindCalm, hourly.Wind)
	last := fs[len(fs)-1]
	require.Equal(t, StatusBad, last.Status)
	assert.Contains(t, last.Message, "consecutive daytime hours, limit 12")
	// Calm nights between windy days: no alarm.
	bad, good := statuses(runWindow(cfg, config.StationAlerts{}, weather{windNight: 0}.hours(4*24), alert.KindCalm, hourly.Wind))
	assert.Zero(t, bad)
	assert.Positive(t, good)
}

func TestHumidityDrift(t *testing.T) {
	cfg := testAlerts()
	optIn := config.StationAlerts{HumidityDrift: true}
	// A sensor that no longer reads above 84 % in a climate whose nights saturate.
	fs := runWindow(cfg, optIn, weather{rhCap: 84}.hours(8*24), alert.KindHumidityDrift, hourly.RelHumidity)
	last := fs[len(fs)-1]
	require.Equal(t, StatusBad, last.Status, last.Message)
	assert.Contains(t, last.Message, "nightly max RH over the last 5 nights")
	assert.Contains(t, last.Message, "expected >= 90 %")

	// Humid nights that saturate: no alarm, and the verdict is good.
	bad, good := statuses(runWindow(cfg, optIn, weather{}.hours(8*24), alert.KindHumidityDrift, hourly.RelHumidity))
	assert.Zero(t, bad)
	assert.Positive(t, good)

	// An arid site never saturates: without the opt-in the check does not run.
	arid := weather{nightRHMax: 40, dayRHMin: 12}.hours(8 * 24)
	assert.Empty(t, runWindow(cfg, config.StationAlerts{}, arid, alert.KindHumidityDrift, hourly.RelHumidity))
}

func TestHumidityDriftDewGap(t *testing.T) {
	cfg := testAlerts()
	cfg.HumidityDrift.RHBelow = ptr(50.0) // rely on the dew point gap alone
	cfg.HumidityDrift.DewGap = ptr(3.0)
	optIn := config.StationAlerts{HumidityDrift: true}
	fs := runWindow(cfg, optIn, weather{rhCap: 70}.hours(8*24), alert.KindHumidityDrift, hourly.RelHumidity)
	last := fs[len(fs)-1]
	require.Equal(t, StatusBad, last.Status)
	assert.Contains(t, last.Message, "above the dew point")
}

func TestNeighbours(t *testing.T) {
	cfg := testAlerts()
	windows := map[string][]HourObs{
		"north": weather{}.hours(5 * 24),
		"south": weather{tOffset: 0.6}.hours(5 * 24),
		"west":  weather{tOffset: -0.4}.hours(5 * 24),
		"hill":  weather{tOffset: 3.2}.hours(5 * 24), // radiation shield lost its fan?
	}
	fs := NeighbourChecks("brackenfold", "hill", cfg, windows)
	f, ok := find(fs, alert.KindNeighbours, hourly.AirTemp)
	require.True(t, ok)
	require.Equal(t, StatusBad, f.Status)
	assert.InDelta(t, 3.2, f.Value, 0.05)
	assert.Contains(t, f.Message, "median of 3 other stations")
	f, ok = find(fs, alert.KindNeighbours, hourly.Solar)
	require.True(t, ok)
	assert.Equal(t, StatusGood, f.Status)

	for _, id := range []string{"north", "south", "west"} {
		f, ok := find(NeighbourChecks("brackenfold", id, cfg, windows), alert.KindNeighbours, hourly.AirTemp)
		require.True(t, ok)
		assert.NotEqual(t, StatusBad, f.Status, id)
	}
	// Two stations cannot tell which one is wrong.
	two := map[string][]HourObs{"north": windows["north"], "hill": windows["hill"]}
	assert.Empty(t, NeighbourChecks("brackenfold", "hill", cfg, two))
}

func TestDayRatioOfClearDayNearEnvelope(t *testing.T) {
	// With the sky at 0.98 of Rso every hour, the day's ratio is 0.98 and it
	// looks clear; the check works with the engine's Rso (FAO-56 eq. 37).
	days := dayRatios(weather{}.hours(2*24), 0.08)
	require.NotEmpty(t, days)
	assert.InDelta(t, 0.98, days[0].ratio, 1e-9)
	assert.True(t, days[0].clearShape)
	assert.False(t, math.IsInf(days[0].spread, 0))
}

// TestDayEnvelopeMatchesDailyRso checks that the clear-sky energy the
// envelope check sums from the hours equals the daily clear-sky radiation of
// the daily method. FAO-56 Example 8 (20° S, 3 September): Ra = 32.2
// MJ m-2 d-1 (from memory); FAO-56 eq. 37 at sea level: Rso = 0.75 Ra =
// 24.15 MJ m-2 d-1. The hourly sum may differ from the daily integral by the
// sun's motion within each hour; 1.5 % is allowed (common practice, no source).
func TestDayEnvelopeMatchesDailyRso(t *testing.T) {
	st := hourly.Station{Latitude: -20, Longitude: 0, Elevation: 0, UTCOffset: 0}
	var rso, ra float64
	for i := range 24 {
		start := time.Date(2026, 9, 3, i, 0, 0, 0, time.UTC)
		sp := hourly.SunForPeriod(st, start, time.Hour)
		ra += sp.Ra
		rso += hourly.RsoSimple(sp.Ra, st.Elevation)
	}
	assert.InEpsilon(t, 32.2, ra, 0.015, "FAO-56 Example 8")
	assert.InEpsilon(t, 24.15, rso, 0.015, "FAO-56 eq. 37 with Example 8")

	// A sensor reading exactly Rso every hour gives a day ratio of 1.
	var obs []HourObs
	for i := range 24 {
		start := time.Date(2026, 9, 3, i, 0, 0, 0, time.UTC)
		sp := hourly.SunForPeriod(st, start, time.Hour)
		r := hourly.RsoSimple(sp.Ra, 0)
		obs = append(obs, HourObs{Start: start, Local: start, HasSun: true, SunElevation: sp.Elevation, Ra: sp.Ra, Rso: r,
			Q: map[hourly.Quantity]QStats{hourly.Solar: {N: 60, Mean: r / 0.0036, Min: r / 0.0036, Max: r / 0.0036}}})
	}
	days := dayRatios(obs, 0.08)
	require.Len(t, days, 1)
	assert.InDelta(t, 1.0, days[0].ratio, 1e-9)
}
