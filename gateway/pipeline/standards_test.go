package pipeline

import (
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/ingest"
	"etpulse/hourly"
)

// TestSolarFillCappedAtRso: with a 24 h temperature range of about 32 °C the
// Hargreaves-Samani estimate (FAO-56 eq. 50, kRs 0.16) exceeds clear-sky
// radiation (0.16 √32 = 0.905 > 0.756 = 0.75 + 2e-5 x 300, eq. 37); the fill
// is limited to Rso and the record says so.
func TestSolarFillCappedAtRso(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	day := time.Date(2026, 7, 14, 8, 0, 0, 0, time.UTC) // 00:00 local
	target := day.Add(12 * time.Hour)                   // 12:00 local
	gate := gateFunc(func(site, station string, hour time.Time) Gate {
		if hour.Equal(target) {
			return Gate{Exclude: []hourly.Quantity{hourly.Solar}}
		}
		return Gate{}
	})
	p, _ := newTestPipeline(t, db, Options{Gate: gate})
	rds := benchReadings(day, target.Add(time.Hour+10*time.Minute), 5*time.Minute)
	for i := range rds {
		if rds[i].Sample.Quantity == hourly.AirTemp {
			rds[i].Sample.Value = 22 + 2*(rds[i].Sample.Value-22) // an arid day: range 32 °C
		}
	}
	out := feed(t, p, latest(rds), rds)
	require.Len(t, out, 13)
	filled := out[12]
	require.Equal(t, target, filled.Start)
	require.NotNil(t, filled.Result)
	assert.Equal(t, FillHargreaves, filled.Fill)
	assert.Greater(t, filled.Inputs.Solar, filled.Result.Rso, "the estimate itself, kept as the input")
	assert.True(t, filled.Inputs.SolarEstimated)
	assert.True(t, filled.Result.SolarCapped)
	assert.Equal(t, filled.Result.Rso, filled.Result.Rs)
	assert.Contains(t, filled.Flags, hourly.FlagSolarCapped)

	// The stored and published form keeps it.
	b, err := MarshalRecord(filled)
	require.NoError(t, err)
	back, err := UnmarshalRecord(b)
	require.NoError(t, err)
	assert.True(t, back.Result.SolarCapped)
	assert.Equal(t, back.Result.Rso, back.Result.Rs)
	assert.InDelta(t, filled.Result.ET, back.Result.ET, 0.005, "rounded to 0.01 mm on the wire")
	assert.True(t, back.Inputs.SolarEstimated)

	for _, rec := range out[:12] {
		assert.NotContains(t, rec.Flags, hourly.FlagSolarCapped, rec.LocalStart)
	}
}

// TestCalmHoursFlagged: the station's minimum wind (default 0.5 m/s, FAO-56
// ch. 4) applies to calm hours and the record says so.
func TestCalmHoursFlagged(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, cfg := newTestPipeline(t, db, Options{})
	require.Equal(t, hourly.DefaultMinWind2, cfg.Sites[0].Stations[0].HourlyStation().MinWind2)
	rds := benchReadings(h10, h10.Add(time.Hour+10*time.Minute), 5*time.Minute)
	calm := make([]ingest.Reading, 0, len(rds))
	for _, r := range rds {
		if r.Sample.Quantity == hourly.Wind {
			r.Sample.Value = 0.2
		}
		calm = append(calm, r)
	}
	out := feed(t, p, latest(calm), calm)
	require.Len(t, out, 1)
	require.NotNil(t, out[0].Result)
	assert.True(t, out[0].Result.WindFloored)
	assert.Equal(t, 0.5, out[0].Result.Wind2)
	assert.Contains(t, out[0].Flags, hourly.FlagWindFloor)
}

// TestOutageDropsStaleCarry: after a 28-hour outage the first night hours
// do not use the cloudiness of two days earlier: the start-up value is used
// and flagged (hourly.CarryUsable, the rule calc and replay follow too).
func TestOutageDropsStaleCarry(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	day := time.Date(2026, 7, 14, 8, 0, 0, 0, time.UTC) // 00:00 local
	first := benchReadings(day, day.Add(20*time.Hour+10*time.Minute), 5*time.Minute)
	out := feed(t, p, latest(first), first)
	require.Len(t, out, 20)
	evening := out[19] // 19:00 local: carried from the afternoon
	require.NotNil(t, evening.Result)
	require.Equal(t, hourly.FcdCarried, evening.Result.FcdSource)

	back := day.Add(20*time.Hour + 28*time.Hour) // 04:00 local two days later
	second := benchReadings(back, back.Add(time.Hour+10*time.Minute), 5*time.Minute)
	out = feed(t, p, latest(second), second)
	var night *hourly.Record
	for i := range out {
		if out[i].Start.Equal(back) {
			night = &out[i]
		}
	}
	require.NotNil(t, night)
	require.NotNil(t, night.Result)
	assert.Equal(t, hourly.FcdDefault, night.Result.FcdSource)
	assert.True(t, night.Result.CarryExpired)
	assert.Contains(t, night.Flags, hourly.FlagFcdDefault)
	assert.Contains(t, night.Flags, hourly.FlagFcdExpired)
}
