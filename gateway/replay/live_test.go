package replay

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/ingest"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// liveConfig is an invented station whose pyranometer readings above
// 900 W/m2 are implausible and excluded while the alert lasts (the hour is
// then filled by Hargreaves-Samani).
const liveConfig = `
broker: {url: 'tcp://127.0.0.1:1883', client_id: etpulse-replay-live}
http: {disabled: true}
alerts:
  quantities:
    solar: {max: 900, response: exclude}
sites:
- id: larkspur
  stations:
  - id: mast
    latitude: 38.5
    longitude: -121.7
    elevation_m: 20
    utc_offset_hours: -8
    sensors:
    - {id: t, topic: larkspur/mast/t, format: number, quantity: air_temp, unit: degC}
    - {id: rh, topic: larkspur/mast/rh, format: number, quantity: rel_humidity, unit: '%'}
    - {id: u, topic: larkspur/mast/u, format: number, quantity: wind, unit: m/s}
    - {id: pyr, topic: larkspur/mast/rs, format: number, quantity: solar, unit: W/m2}
`

// liveReadings is 30 hours of invented weather every 5 minutes from local
// midnight, with the pyranometer reading 1000 W/m2 (above the configured
// 900) from 12:00 to 12:10 local time, and a calm night.
func liveReadings(start time.Time) []ingest.Reading {
	var out []ingest.Reading
	for at := start; at.Before(start.Add(30 * time.Hour)); at = at.Add(5 * time.Minute) {
		local := at.Add(-8 * time.Hour)
		h := float64(local.Hour()) + float64(local.Minute())/60
		tc := 21 + 9*math.Sin((h-9)/24*2*math.Pi)
		rh := 55 - 25*math.Sin((h-9)/24*2*math.Pi)
		u := 0.2 + 2*math.Max(0, math.Sin((h-6)/12*math.Pi))
		rs := math.Max(0, 820*math.Sin((h-6)/12*math.Pi))
		if local.Hour() == 12 && local.Minute() <= 10 {
			rs = 1000
		}
		for _, s := range []hourly.Sample{
			{Sensor: "t", Quantity: hourly.AirTemp, Value: tc},
			{Sensor: "rh", Quantity: hourly.RelHumidity, Value: rh},
			{Sensor: "u", Quantity: hourly.Wind, Value: u},
			{Sensor: "pyr", Quantity: hourly.Solar, Value: rs},
		} {
			s.Time = at
			out = append(out, ingest.Reading{Site: "larkspur", Station: "mast", Sample: s})
		}
	}
	return out
}

// TestReplayMatchesLiveWithExcludedSensor: the live gateway (its own
// composition of pipeline, alert monitor and quality gate, fed reading by
// reading as they arrive) and `etpulse replay` of the same readings give
// identical records, among them the hour whose pyranometer was excluded and
// filled by Hargreaves-Samani.
func TestReplayMatchesLiveWithExcludedSensor(t *testing.T) {
	cfg, err := config.Parse([]byte(liveConfig))
	require.NoError(t, err)
	start := time.Date(2026, 7, 14, 8, 0, 0, 0, time.UTC) // 00:00 local
	rds := liveReadings(start)

	// Live: the gateway's parts, each timestamp's readings arriving at it.
	db, err := state.Open(filepath.Join(t.TempDir(), "live.db"))
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	now := start
	g, err := gateway.New(cfg, gateway.Deps{DB: db, Clock: clock.Func(func() time.Time { return now })})
	require.NoError(t, err)
	p := g.Pipeline()
	var live []hourly.Record
	for i := 0; i < len(rds); {
		j := i
		for j < len(rds) && rds[j].Sample.Time.Equal(rds[i].Sample.Time) {
			j++
		}
		now = rds[i].Sample.Time
		res, err := p.Ingest(now, rds[i:j])
		require.NoError(t, err)
		live = append(live, res.Records...)
		recs, err := p.Tick(now)
		require.NoError(t, err)
		live = append(live, recs...)
		i = j
	}
	require.GreaterOrEqual(t, len(live), 28)

	// Replay of the same readings.
	var in strings.Builder
	in.WriteString("time,station,quantity,value,unit\n")
	units := map[hourly.Quantity]string{hourly.AirTemp: "degC", hourly.RelHumidity: "%", hourly.Wind: "m/s", hourly.Solar: "W/m2"}
	for _, r := range rds {
		fmt.Fprintf(&in, "%s,mast,%s,%s,%s\n", r.Sample.Time.Format(time.RFC3339), r.Sample.Quantity,
			strconv.FormatFloat(r.Sample.Value, 'f', -1, 64), units[r.Sample.Quantity])
	}
	var replayed []hourly.Record
	var out strings.Builder
	_, err = Run(context.Background(), cfg, strings.NewReader(in.String()), &out, Options{OnRecord: func(r hourly.Record) { replayed = append(replayed, r) }})
	require.NoError(t, err)
	require.GreaterOrEqual(t, len(replayed), len(live))

	filled := 0
	for i, want := range live {
		got := replayed[i]
		require.Equal(t, want.Start, got.Start)
		assert.Equal(t, want, got, "hour %s", want.LocalStart)
		if want.Fill != "" {
			filled++
			assert.Equal(t, "2026-07-14T12:00", want.LocalStart)
			assert.Contains(t, got.Flags, "alert:range:solar")
		}
	}
	assert.Equal(t, 1, filled, "the excluded hour is filled in both")
}

// TestReplayIncompleteHourInputsEmpty: an incomplete hour prints empty
// input fields, as the MQTT record prints null, not 0.0000 that reads as a
// measurement.
func TestReplayIncompleteHourInputsEmpty(t *testing.T) {
	rec := hourly.Record{Site: "larkspur", Station: "mast", Reference: hourly.Short,
		Start: time.Date(2026, 7, 14, 18, 0, 0, 0, time.UTC), End: time.Date(2026, 7, 14, 19, 0, 0, 0, time.UTC),
		Stats: map[hourly.Quantity]hourly.Stats{
			hourly.AirTemp: {Count: 3, Min: 20, Max: 21, Mean: 20.5, Coverage: 0.25},
			hourly.Wind:    {Count: 3, Min: 1, Max: 2, Mean: 1.5, Coverage: 0.25},
		},
		Flags: []string{"incomplete:air_temp"}}
	row := recordRow(rec)
	col := map[string]int{}
	for i, c := range Columns {
		col[c] = i
	}
	for _, c := range []string{"air_temp_c", "ea_kpa", "wind_2m_m_s", "solar_mj_m2", "et_mm"} {
		assert.Equal(t, "", row[col[c]], c)
	}
	assert.Equal(t, "0.0000", row[col["rain_mm"]], "rain is a sum; none fell")
}
