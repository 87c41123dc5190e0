package pipeline

import (
	"encoding/json"
	"errors"
	"math"
	"path/filepath"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/config"
	"etpulse/gateway/ingest"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// testConfig is an invented two-station farm ("Larkspur Hollow") used by the
// pipeline tests. Station "bench" is on UTC-8 standard time; "flats" on
// UTC+5.5 so hours start at :30 UTC.
const testConfig = `
broker: {url: "tcp://127.0.0.1:1883", client_id: pipeline-test}
sites:
  - id: larkspur
    stations:
      - id: bench
        latitude: 36.6
        longitude: -120.4
        elevation_m: 90
        utc_offset_hours: -8
        reference: short
        wind_height_m: 3
        close_grace: 2m
        late_window: 6h
        silence_close: 15m
        max_future: 5m
        sensors:
          - {id: t, topic: lh/bench/t, format: number, quantity: air_temp, unit: degC}
          - {id: rh, topic: lh/bench/rh, format: number, quantity: rel_humidity, unit: "%"}
          - {id: u, topic: lh/bench/u, format: number, quantity: wind, unit: m/s}
          - {id: rs, topic: lh/bench/rs, format: number, quantity: solar, unit: W/m2}
          - {id: gauge, topic: lh/bench/rain, format: number, quantity: rain, unit: mm, rain_mode: counter, rollover_at: 1000}
      - id: flats
        latitude: 20.1
        longitude: 77.3
        elevation_m: 300
        utc_offset_hours: 5.5
        reference: tall
        sensors:
          - {id: t, topic: lh/flats/t, format: number, quantity: air_temp, unit: degC}
          - {id: td, topic: lh/flats/td, format: number, quantity: dew_point, unit: degC}
          - {id: u, topic: lh/flats/u, format: number, quantity: wind, unit: m/s}
          - {id: rs, topic: lh/flats/rs, format: number, quantity: solar, unit: W/m2}
`

func loadTestConfig(t testing.TB) *config.Config {
	t.Helper()
	cfg, err := config.Parse([]byte(testConfig))
	require.NoError(t, err)
	return cfg
}

func openDB(t testing.TB, path string) *bbolt.DB {
	t.Helper()
	db, err := state.Open(path)
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	return db
}

// recorder is an HourHandler keeping what it was given.
type recorder struct {
	recs []hourly.Record
	fail error
}

func (r *recorder) HandleHour(tx *bbolt.Tx, rec hourly.Record) error {
	if r.fail != nil {
		return r.fail
	}
	r.recs = append(r.recs, rec)
	return nil
}

var _ HourHandler = (*recorder)(nil)

func newTestPipeline(t testing.TB, db *bbolt.DB, o Options) (*Pipeline, *config.Config) {
	t.Helper()
	cfg := loadTestConfig(t)
	o.DB = db
	p, err := New(cfg, o)
	require.NoError(t, err)
	return p, cfg
}

// weather is an invented smooth diurnal cycle for the bench station, local
// standard time UTC-8.
func weather(at time.Time) (tc, rh, u, rs float64) {
	local := at.Add(-8 * time.Hour)
	h := float64(local.Hour()) + float64(local.Minute())/60
	tc = 22 + 8*math.Sin((h-9)/24*2*math.Pi)
	rh = 55 - 25*math.Sin((h-9)/24*2*math.Pi)
	u = 2.5 + math.Sin(h/24*2*math.Pi)
	rs = math.Max(0, 850*math.Sin((h-6)/12*math.Pi))
	return
}

// benchReadings returns the bench station's readings every step in [from, to).
func benchReadings(from, to time.Time, step time.Duration) []ingest.Reading {
	var out []ingest.Reading
	for at := from; at.Before(to); at = at.Add(step) {
		for _, s := range weatherSamples(at) {
			out = append(out, ingest.Reading{Site: "larkspur", Station: "bench", Sample: s})
		}
	}
	return out
}

// weatherSamples is one sample of each of the bench station's four
// sensors at at.
func weatherSamples(at time.Time) []hourly.Sample {
	tc, rh, u, rs := weather(at)
	return []hourly.Sample{
		{Sensor: "t", Quantity: hourly.AirTemp, Value: tc, Time: at},
		{Sensor: "rh", Quantity: hourly.RelHumidity, Value: rh, Time: at},
		{Sensor: "u", Quantity: hourly.Wind, Value: u, Time: at},
		{Sensor: "rs", Quantity: hourly.Solar, Value: rs, Time: at},
	}
}

// feed ingests readings and ticks at now, returning every record emitted.
func feed(t testing.TB, p *Pipeline, now time.Time, rds []ingest.Reading) []hourly.Record {
	t.Helper()
	res, err := p.Ingest(now, rds)
	require.NoError(t, err)
	out, err := p.Tick(now)
	require.NoError(t, err)
	return append(res.Records, out...)
}

// latest returns the latest reading time of rds: the clock of a gateway that
// has just received them.
func latest(rds []ingest.Reading) time.Time {
	var t time.Time
	for _, r := range rds {
		if r.Sample.Time.After(t) {
			t = r.Sample.Time
		}
	}
	return t
}

func samplesOf(rds []ingest.Reading, from, to time.Time) []hourly.Sample {
	var out []hourly.Sample
	for _, r := range rds {
		if !r.Sample.Time.Before(from) && r.Sample.Time.Before(to) {
			out = append(out, r.Sample)
		}
	}
	return out
}

// local 10:00 at UTC-8 on an invented summer day.
var h10 = time.Date(2026, 7, 14, 18, 0, 0, 0, time.UTC)

func TestHourStartStandardTime(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	bench, flats := p.lookup("larkspur", "bench"), p.lookup("larkspur", "flats")
	at := time.Date(2026, 7, 14, 18, 42, 0, 0, time.UTC)
	assert.Equal(t, time.Date(2026, 7, 14, 18, 0, 0, 0, time.UTC), bench.hourStart(at))
	assert.Equal(t, "2026-07-14T10:00", bench.localStart(bench.hourStart(at)))
	// UTC+5.5: 18:42 UTC is 00:12 local on the 15th; the hour began 18:30 UTC.
	assert.Equal(t, time.Date(2026, 7, 14, 18, 30, 0, 0, time.UTC), flats.hourStart(at))
	assert.Equal(t, "2026-07-15T00:00", flats.localStart(flats.hourStart(at)))
	// Before :30 the hour began at 17:30 UTC.
	assert.Equal(t, time.Date(2026, 7, 14, 17, 30, 0, 0, time.UTC), flats.hourStart(at.Add(-20*time.Minute)))
}

func TestWatermarkClosesHourAndMatchesDirectComputation(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	rec := &recorder{}
	reg := prometheus.NewRegistry()
	p, cfg := newTestPipeline(t, db, Options{Handlers: []HourHandler{rec}, Registerer: reg})
	rds := benchReadings(h10, h10.Add(time.Hour+time.Minute), time.Minute)
	now := h10.Add(time.Hour + time.Minute)

	res, err := p.Ingest(now, rds)
	require.NoError(t, err)
	assert.Equal(t, len(rds), res.Accepted)
	assert.Empty(t, res.Rejected)

	// Watermark 11:00 < 11:00 + grace 2m: still open.
	out, err := p.Tick(now)
	require.NoError(t, err)
	assert.Empty(t, out)

	out = feed(t, p, now.Add(2*time.Minute), benchReadings(h10.Add(time.Hour+2*time.Minute), h10.Add(time.Hour+3*time.Minute), time.Minute))
	require.Len(t, out, 1)
	got := out[0]
	require.Len(t, rec.recs, 1)
	assert.Equal(t, got, rec.recs[0])

	st := cfg.Sites[0].Stations[0]
	agg, err := hourly.AggregateHour(h10, samplesOf(rds, h10, h10.Add(time.Hour)), hourly.AggregateOptions{WindHeight: 3, MinCoverage: st.MinCoverage})
	require.NoError(t, err)
	want, _, err := hourly.Compute(st.HourlyStation(), hourly.Short, agg.Hour, hourly.Carry{})
	require.NoError(t, err)
	require.NotNil(t, got.Result)
	assert.True(t, got.Complete)
	assert.Equal(t, want, *got.Result)
	assert.Equal(t, agg.Stats, got.Stats)
	assert.Equal(t, "larkspur", got.Site)
	assert.Equal(t, "bench", got.Station)
	assert.Equal(t, h10, got.Start)
	assert.Equal(t, h10.Add(time.Hour), got.End)
	assert.Equal(t, "2026-07-14T10:00", got.LocalStart)
	assert.Equal(t, 0, got.Revision)
	assert.Equal(t, 60, got.Stats[hourly.AirTemp].Count)
	assert.Greater(t, got.Result.ET, 0.2, "a sunny mid-morning hour")
	assert.NotContains(t, got.Flags, FlagSilenceClose)

	assert.Equal(t, 1.0, testutil.ToFloat64(p.m.closed.WithLabelValues("larkspur", "bench", "true")))
	assert.InDelta(t, want.ET, testutil.ToFloat64(p.m.lastET.WithLabelValues("larkspur", "bench", "short")), 1e-12)
	assert.Equal(t, float64(h10.Add(time.Hour).Unix()), testutil.ToFloat64(p.m.lastClosed.WithLabelValues("larkspur", "bench")))

	// The results topic carries the record at its quantities' precision
	// (gateway/vocab): a decoded record encodes to the same bytes, and each
	// number is within half a step of the computed one. The state file
	// keeps full precision (below).
	b, err := MarshalRecord(got)
	require.NoError(t, err)
	back, err := UnmarshalRecord(b)
	require.NoError(t, err)
	again, err := MarshalRecord(back)
	require.NoError(t, err)
	assert.JSONEq(t, string(b), string(again))
	assert.InDelta(t, got.Result.ET, back.Result.ET, 0.005)
	assert.InDelta(t, got.Result.Rn, back.Result.Rn, 0.0005)
	assert.InDelta(t, got.Inputs.AirTemp, back.Inputs.AirTemp, 0.005)
	assert.Equal(t, got.Stats[hourly.AirTemp].Count, back.Stats[hourly.AirTemp].Count)
	stored, ok, err := p.Record("larkspur", "bench", h10)
	require.NoError(t, err)
	require.True(t, ok)
	assert.Equal(t, got.Result, stored.Result)
}

// An incomplete hour publishes its inputs as null, not as zeros a consumer
// could mistake for measurements (0 degC, calm, dark).
func TestIncompleteRecordInputsNull(t *testing.T) {
	rec := hourly.Record{Site: "larkspur", Station: "bench", Start: h10, End: h10.Add(time.Hour),
		Stats: map[hourly.Quantity]hourly.Stats{hourly.AirTemp: {Count: 3, Min: 20, Max: 21, Mean: 20.5, Coverage: 0.25}}}
	b, err := MarshalRecord(rec)
	require.NoError(t, err)
	var raw struct {
		ET     *float64            `json:"et_mm"`
		Inputs map[string]*float64 `json:"inputs"`
	}
	require.NoError(t, json.Unmarshal(b, &raw))
	assert.Nil(t, raw.ET)
	for _, k := range []string{"air_temp_c", "ea_kpa", "wind_2m_m_s", "solar_mj_m2"} {
		v, ok := raw.Inputs[k]
		assert.True(t, ok, k)
		assert.Nil(t, v, k)
	}
	back, err := UnmarshalRecord(b)
	require.NoError(t, err)
	assert.Zero(t, back.Inputs.AirTemp)
	assert.Equal(t, rec.Stats, back.Stats)
}

func TestDuplicatesDropped(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	rds := benchReadings(h10, h10.Add(time.Hour), 5*time.Minute)
	now := h10.Add(time.Hour)
	_, err := p.Ingest(now, rds)
	require.NoError(t, err)
	// QoS 1 redelivery of the first ten readings, and a duplicate inside one batch.
	again := append(append([]ingest.Reading{}, rds[:10]...), rds[20], rds[20])
	res, err := p.Ingest(now, again)
	require.NoError(t, err)
	assert.Equal(t, 12, res.Duplicates)
	assert.Equal(t, 0, res.Accepted)
	assert.Equal(t, 12.0, testutil.ToFloat64(p.m.duplicates.WithLabelValues("larkspur", "bench")))

	out, err := p.Tick(h10.Add(time.Hour + 15*time.Minute))
	require.NoError(t, err)
	require.Len(t, out, 1)
	assert.Equal(t, 12, out[0].Stats[hourly.AirTemp].Count)
}

func TestSilenceClosesQuietStation(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	// Data only for the first 40 minutes, then the station goes quiet.
	_, err := p.Ingest(h10.Add(40*time.Minute), benchReadings(h10, h10.Add(40*time.Minute), 5*time.Minute))
	require.NoError(t, err)
	assert.Equal(t, h10.Add(75*time.Minute), p.NextDeadline())

	out, err := p.Tick(h10.Add(74 * time.Minute))
	require.NoError(t, err)
	assert.Empty(t, out)
	out, err = p.Tick(h10.Add(75 * time.Minute))
	require.NoError(t, err)
	require.Len(t, out, 1)
	rec := out[0]
	assert.False(t, rec.Complete, "8 of 12 slots is below 0.75")
	assert.Nil(t, rec.Result)
	assert.Contains(t, rec.Flags, FlagSilenceClose)
	assert.Contains(t, rec.Flags, "incomplete:air_temp")
	assert.Contains(t, rec.Flags, "incomplete:solar")

	// The clock keeps closing the following (empty) hours.
	out, err = p.Tick(h10.Add(3*time.Hour + 15*time.Minute))
	require.NoError(t, err)
	require.Len(t, out, 2)
	assert.Equal(t, h10.Add(time.Hour), out[0].Start)
	assert.Equal(t, h10.Add(2*time.Hour), out[1].Start)
	assert.Equal(t, 0, out[1].Stats[hourly.AirTemp].Count)
	assert.Equal(t, 3.0, testutil.ToFloat64(p.m.closed.WithLabelValues("larkspur", "bench", "false")))
}

// A logger that uploads a backlog long after the fact is not a quiet
// station: while its readings keep arriving, its hours close by their own
// clock, complete and once, not by the wall clock at the first reading and
// then revised with every later message.
func TestBacklogUploadClosesByReadingClock(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	start := h10.Add(5 * time.Hour)                                                         // far past silence_close of every hour uploaded
	recs, _ := upload(t, p, start, benchReadings(h10, h10.Add(3*time.Hour), 5*time.Minute)) // one message at a time
	assertBacklogHours(t, recs)
	// Once the upload stops, the last uploaded hour closes by silence_close
	// after the last arrival (complete), then the empty hours up to the wall
	// clock follow, as for any quiet station.
	last := start.Add(time.Duration(3*12*4-1) * 100 * time.Millisecond)
	assert.Equal(t, last.Add(15*time.Minute), p.NextDeadline())
	out, err := p.Tick(last.Add(15*time.Minute - time.Second))
	require.NoError(t, err)
	assert.Empty(t, out)
	out, err = p.Tick(last.Add(15 * time.Minute))
	require.NoError(t, err)
	require.Len(t, out, 3, "12:00 with data, 13:00 and 14:00 empty")
	assert.Equal(t, h10.Add(2*time.Hour), out[0].Start)
	assert.True(t, out[0].Complete)
	assert.Contains(t, out[0].Flags, FlagSilenceClose)
	assert.False(t, out[2].Complete)
}

func TestLateReadingRevisesHour(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	rec := &recorder{}
	p, cfg := newTestPipeline(t, db, Options{Handlers: []HourHandler{rec}})
	all := benchReadings(h10, h10.Add(time.Hour), 5*time.Minute)
	var onTime, late []ingest.Reading
	for _, r := range all {
		// The pyranometer's 10:35 and 10:40 readings arrive hours late.
		if r.Sample.Sensor == "rs" && (r.Sample.Time.Minute() == 35 || r.Sample.Time.Minute() == 40) {
			late = append(late, r)
			continue
		}
		onTime = append(onTime, r)
	}
	out := feed(t, p, latest(onTime), onTime)
	out = append(out, feed(t, p, h10.Add(time.Hour+5*time.Minute), benchReadings(h10.Add(time.Hour), h10.Add(time.Hour+10*time.Minute), 5*time.Minute))...)
	require.Len(t, out, 1)
	first := out[0]
	require.True(t, first.Complete, "10 of 12 solar slots meets 0.75")

	now := h10.Add(4 * time.Hour)
	res, err := p.Ingest(now, late)
	require.NoError(t, err)
	assert.Equal(t, 2, res.Late)
	out, err = p.Tick(now)
	require.NoError(t, err)
	for _, r := range out {
		assert.False(t, r.Start.Equal(h10), "the revision waits for the late readings to stop for the close grace")
	}
	assert.Equal(t, now.Add(2*time.Minute), p.NextDeadline())
	now = now.Add(2 * time.Minute)
	out, err = p.Tick(now)
	require.NoError(t, err)
	// Hour 10 is revised.
	var revised *hourly.Record
	for i := range out {
		if out[i].Start.Equal(h10) {
			revised = &out[i]
		}
	}
	require.NotNil(t, revised)
	assert.Equal(t, 1, revised.Revision)
	assert.Equal(t, 12, revised.Stats[hourly.Solar].Count)
	st := cfg.Sites[0].Stations[0]
	agg, err := hourly.AggregateHour(h10, samplesOf(all, h10, h10.Add(time.Hour)), hourly.AggregateOptions{WindHeight: 3, MinCoverage: st.MinCoverage})
	require.NoError(t, err)
	want, _, err := hourly.Compute(st.HourlyStation(), hourly.Short, agg.Hour, hourly.Carry{})
	require.NoError(t, err)
	assert.Equal(t, want, *revised.Result, "the revision is computed with the carry the hour was first closed with")
	assert.NotEqual(t, first.Result.ET, revised.Result.ET)

	var revs []int
	for _, r := range rec.recs {
		if r.Start.Equal(h10) {
			revs = append(revs, r.Revision)
		}
	}
	assert.Equal(t, []int{0, 1}, revs, "handlers see revision 0 then 1")
	assert.Equal(t, 1.0, testutil.ToFloat64(p.m.revisions.WithLabelValues("larkspur", "bench")))

	// No further revision without new late data.
	out, err = p.Tick(now.Add(time.Minute))
	require.NoError(t, err)
	for _, r := range out {
		assert.False(t, r.Start.Equal(h10))
	}
}

func TestTooOldAndTooFuture(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	_, err := p.Ingest(h10.Add(2*time.Hour), benchReadings(h10, h10.Add(2*time.Hour), 5*time.Minute))
	require.NoError(t, err)
	_, err = p.Tick(h10.Add(2 * time.Hour))
	require.NoError(t, err)

	now := h10.Add(8 * time.Hour) // hour 10 ended 7 h ago: late window 6 h has passed
	old := benchReadings(h10.Add(2*time.Minute), h10.Add(3*time.Minute), time.Minute)[:1]
	future := benchReadings(now.Add(6*time.Minute), now.Add(7*time.Minute), time.Minute)[:1]
	res, err := p.Ingest(now, append(old, future...))
	require.NoError(t, err)
	require.Len(t, res.Rejected, 1)
	assert.Equal(t, ingest.ReasonTooOld, res.Rejected[0].Reason)
	assert.Contains(t, res.Rejected[0].Err.Error(), "late window of 6h0m0s has passed")
	assert.Equal(t, 1.0, testutil.ToFloat64(p.m.rejected.WithLabelValues("larkspur", "bench", "too_old")))
	assert.Equal(t, 1, res.Held, "a reading too far ahead is held (TestHeldReadingsBounded: too_future when the holding is full)")
	assert.Equal(t, 0, res.Accepted)
}

func TestOutOfOrderFirstReadingsMoveCursorBack(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	rds := benchReadings(h10, h10.Add(2*time.Hour), 5*time.Minute)
	// The second hour's readings come first, then the first hour's.
	n := len(rds) / 2
	now := h10.Add(2 * time.Hour)
	_, err := p.Ingest(now, rds[n:n+4])
	require.NoError(t, err)
	res, err := p.Ingest(now, append(append([]ingest.Reading{}, rds[:n]...), rds[n+4:]...))
	require.NoError(t, err)
	assert.Empty(t, res.Rejected)
	out, err := p.Flush()
	require.NoError(t, err)
	out = append(res.Records, out...)
	require.Len(t, out, 2)
	assert.Equal(t, h10, out[0].Start)
	assert.True(t, out[0].Complete)
	assert.True(t, out[1].Complete)
}

func TestRainCounter(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	rd := func(min int, v float64) ingest.Reading {
		return ingest.Reading{Site: "larkspur", Station: "bench", Counter: true, Rollover: 1000, Sample: hourly.Sample{
			Sensor: "gauge", Quantity: hourly.Rain, Time: h10.Add(time.Duration(min) * time.Minute), Value: v}}
	}
	rds := benchReadings(h10, h10.Add(time.Hour+5*time.Minute), 5*time.Minute)
	rds = append(rds,
		rd(0, 998.0),  // baseline: 0
		rd(10, 999.0), // +1.0
		rd(20, 0.4),   // wraps at 1000: +1.4
		rd(15, 999.5), // older than the previous counter reading: dropped
		rd(30, 0.4),   // +0
	)
	now := h10.Add(time.Hour + 5*time.Minute)
	res, err := p.Ingest(now, rds[:len(rds)-2])
	require.NoError(t, err)
	assert.Empty(t, res.Rejected)
	// In a later batch: the stale one is refused, and a redelivered one is a duplicate.
	res, err = p.Ingest(now, append(rds[len(rds)-2:], rd(20, 0.4)))
	require.NoError(t, err)
	require.Len(t, res.Rejected, 1)
	assert.Equal(t, ReasonStaleCounter, res.Rejected[0].Reason)
	assert.Equal(t, 1, res.Duplicates)
	out, err := p.Tick(h10.Add(2 * time.Hour))
	require.NoError(t, err)
	require.NotEmpty(t, out)
	assert.InDelta(t, 2.4, out[0].Rain, 1e-9)
	assert.Equal(t, 4, out[0].Stats[hourly.Rain].Count)

	// The previous counter value survives a restart.
	p2, err := New(loadTestConfig(t), Options{DB: db})
	require.NoError(t, err)
	_, err = p2.Ingest(h10.Add(2*time.Hour), []ingest.Reading{rd(70, 3.4)})
	require.NoError(t, err)
	out, err = p2.Tick(h10.Add(3 * time.Hour))
	require.NoError(t, err)
	require.NotEmpty(t, out)
	assert.InDelta(t, 3.0, out[0].Rain, 1e-9)
}

func TestCarryPersistsAcrossRestart(t *testing.T) {
	// One uninterrupted run over an afternoon and evening ...
	dir := t.TempDir()
	from := time.Date(2026, 7, 14, 21, 0, 0, 0, time.UTC) // 13:00 local
	to := from.Add(10 * time.Hour)
	rds := benchReadings(from, to.Add(10*time.Minute), 5*time.Minute)
	run := func(db *bbolt.DB, part []ingest.Reading) []hourly.Record {
		p, err := New(loadTestConfig(t), Options{DB: db})
		require.NoError(t, err)
		var out []hourly.Record
		for i := 0; i < len(part); i += 8 {
			j := min(i+8, len(part))
			now := part[j-1].Sample.Time
			out = append(out, feed(t, p, now, part[i:j])...)
		}
		return out
	}
	whole := run(openDB(t, filepath.Join(dir, "a.db")), rds)
	require.Len(t, whole, 10)

	// ... and the same readings with the process restarted mid-evening.
	db := openDB(t, filepath.Join(dir, "b.db"))
	cut := len(rds) * 6 / 10
	split := run(db, rds[:cut])
	split = append(split, run(db, rds[cut:])...)
	require.Equal(t, len(whole), len(split))
	sawCarried := false
	for i := range whole {
		assert.Equal(t, whole[i].Result, split[i].Result, "hour %s", whole[i].LocalStart)
		if whole[i].Result != nil && whole[i].Result.FcdSource == hourly.FcdCarried {
			sawCarried = true
		}
	}
	assert.True(t, sawCarried, "the evening hours use the carried cloudiness")
	last := whole[len(whole)-1]
	assert.NotContains(t, last.Flags, FlagFcdDefault)
}

func TestHandlerErrorKeepsHourOpen(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	rec := &recorder{fail: errors.New("disk full")}
	p, _ := newTestPipeline(t, db, Options{Handlers: []HourHandler{rec}})
	_, err := p.Ingest(h10.Add(time.Hour+5*time.Minute), benchReadings(h10, h10.Add(time.Hour+10*time.Minute), 5*time.Minute))
	require.NoError(t, err)
	out, err := p.Tick(h10.Add(time.Hour + 5*time.Minute))
	require.Error(t, err)
	assert.ErrorContains(t, err, "disk full")
	assert.Empty(t, out)
	pend, err := p.Pending()
	require.NoError(t, err)
	assert.Empty(t, pend)

	rec.fail = nil
	out, err = p.Tick(h10.Add(time.Hour + 6*time.Minute))
	require.NoError(t, err)
	require.Len(t, out, 1)
	assert.Len(t, rec.recs, 1)

	pend, err = p.Pending()
	require.NoError(t, err)
	require.Len(t, pend, 1)
	require.NoError(t, p.MarkPublished(pend...))
	pend, err = p.Pending()
	require.NoError(t, err)
	assert.Empty(t, pend)
}

// gateFunc adapts a function to QualityGate.
type gateFunc func(site, station string, hour time.Time) Gate

func (f gateFunc) Gate(site, station string, hour time.Time) Gate { return f(site, station, hour) }

func TestGateExcludesSolarUsesHargreaves(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	day := time.Date(2026, 7, 14, 8, 0, 0, 0, time.UTC) // 00:00 local
	target := day.Add(12 * time.Hour)                   // 12:00 local
	gate := gateFunc(func(site, station string, hour time.Time) Gate {
		if hour.Equal(target) {
			return Gate{Flags: []string{"alert:solar-drift"}, Exclude: []hourly.Quantity{hourly.Solar}}
		}
		if hour.Equal(target.Add(time.Hour)) {
			return Gate{StopET: true}
		}
		return Gate{}
	})
	p, cfg := newTestPipeline(t, db, Options{Gate: gate})
	rds := benchReadings(day, target.Add(2*time.Hour+10*time.Minute), 5*time.Minute)
	out := feed(t, p, latest(rds), rds)
	require.Len(t, out, 14)

	filled := out[12]
	require.Equal(t, target, filled.Start)
	require.True(t, filled.Complete)
	assert.Equal(t, FillHargreaves, filled.Fill)
	assert.Contains(t, filled.Flags, FlagSolarFill)
	assert.Contains(t, filled.Flags, "alert:solar-drift")
	_, hasSolar := filled.Stats[hourly.Solar]
	assert.False(t, hasSolar, "excluded samples are not aggregated")
	// FAO-56 eq. 50 with the 24 h range seen so far (00:00-12:59 local).
	st := cfg.Sites[0].Stations[0]
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, s := range samplesOf(rds, day, target.Add(time.Hour)) {
		if s.Quantity == hourly.AirTemp {
			lo, hi = min(lo, s.Value), max(hi, s.Value)
		}
	}
	ra := hourly.SunForPeriod(st.HourlyStation(), target, time.Hour).Ra
	assert.InDelta(t, 0.16*math.Sqrt(hi-lo)*ra, filled.Inputs.Solar, 1e-12)

	stopped := out[13]
	assert.False(t, stopped.Complete)
	assert.Nil(t, stopped.Result)
	assert.Contains(t, stopped.Flags, FlagETStopped)
}

func TestObserversAndLastSeen(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	var seen []hourly.Sample
	obs := SampleObserverFunc(func(site, station string, s hourly.Sample, now time.Time) { seen = append(seen, s) })
	p, _ := newTestPipeline(t, db, Options{Observers: []SampleObserver{obs}})
	rds := benchReadings(h10, h10.Add(10*time.Minute), 5*time.Minute)
	now := h10.Add(10 * time.Minute)
	_, err := p.Ingest(now, rds)
	require.NoError(t, err)
	_, err = p.Ingest(now, rds) // duplicates are not observed again
	require.NoError(t, err)
	assert.Len(t, seen, len(rds))
	ls, err := p.LastSeen("larkspur", "bench")
	require.NoError(t, err)
	require.Len(t, ls, 4)
	for _, s := range ls {
		assert.Equal(t, h10.Add(5*time.Minute), s.Reading)
		assert.Equal(t, now, s.Arrival)
		// The latest reading's quantity and value are kept too (the reading
		// checks resume from them after a restart).
		var want *hourly.Sample
		for i := range rds {
			if rds[i].Sample.Sensor == s.Sensor && rds[i].Sample.Time.Equal(s.Reading) {
				want = &rds[i].Sample
			}
		}
		require.NotNil(t, want, s.Sensor)
		assert.Equal(t, want.Quantity, s.Quantity, s.Sensor)
		if assert.NotNil(t, s.Value, s.Sensor) {
			assert.Equal(t, want.Value, *s.Value, s.Sensor)
		}
	}
	_, err = p.LastSeen("larkspur", "nowhere")
	assert.Error(t, err)
}

func TestPruneAfterLateWindow(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	_, err := p.Ingest(h10.Add(time.Hour+5*time.Minute), benchReadings(h10, h10.Add(time.Hour+5*time.Minute), 5*time.Minute))
	require.NoError(t, err)
	_, err = p.Tick(h10.Add(time.Hour + 5*time.Minute))
	require.NoError(t, err)
	count := func() (n int) {
		require.NoError(t, db.View(func(tx *bbolt.Tx) error {
			sb, err := p.lookup("larkspur", "bench").buckets(tx)
			require.NoError(t, err)
			n = sb.samples.Stats().KeyN
			return nil
		}))
		return n
	}
	assert.Equal(t, 52, count())
	// Hour 10 closes by silence (a station that never closed an hour and
	// stays quiet past the late window has its readings dropped instead:
	// TestUnsetClockReadingOnNewStationDropped).
	_, err = p.Tick(h10.Add(time.Hour + 20*time.Minute))
	require.NoError(t, err)
	_, err = p.Tick(h10.Add(8*time.Hour + time.Minute))
	require.NoError(t, err)
	assert.Zero(t, count(), "samples of hours past the late window are pruned")
	_, ok, err := p.Record("larkspur", "bench", h10)
	require.NoError(t, err)
	assert.True(t, ok, "hour states are kept for 25 h")
}

// Which readings count as late must not depend on how they were batched:
// one batch or one reading per call give the same first emissions and the
// same latest revisions.
func TestBatchingDoesNotChangeRecords(t *testing.T) {
	from := h10
	rds := benchReadings(from, from.Add(4*time.Hour+10*time.Minute), 5*time.Minute)
	// Hold a few readings back by 70 minutes: their hours close before they arrive.
	var ordered, held []ingest.Reading
	for i, r := range rds {
		if i%37 == 5 {
			held = append(held, r)
			continue
		}
		ordered = append(ordered, r)
		for len(held) > 0 && !r.Sample.Time.Before(held[0].Sample.Time.Add(70*time.Minute)) {
			ordered, held = append(ordered, held[0]), held[1:]
		}
	}
	ordered = append(ordered, held...)
	require.Len(t, ordered, len(rds))

	run := func(size int) (first, final map[time.Time]hourly.Record) {
		db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
		p, _ := newTestPipeline(t, db, Options{})
		var out []hourly.Record
		for i := 0; i < len(ordered); i += size {
			part := ordered[i:min(i+size, len(ordered))]
			res, err := p.Ingest(latest(part), part)
			require.NoError(t, err)
			revs, err := p.Revise()
			require.NoError(t, err)
			out = append(append(out, res.Records...), revs...)
		}
		first, final = map[time.Time]hourly.Record{}, map[time.Time]hourly.Record{}
		for _, r := range out {
			if r.Revision == 0 {
				first[r.Start] = r
			}
			if f, ok := final[r.Start]; !ok || r.Revision > f.Revision {
				final[r.Start] = r
			}
		}
		return first, final
	}
	firstA, finalA := run(len(ordered))
	firstB, finalB := run(1)
	require.Len(t, firstA, 4)
	assert.Equal(t, firstA, firstB)
	revised := 0
	for h, a := range finalA {
		assert.Equal(t, a.Result, finalB[h].Result, h)
		assert.Equal(t, a.Stats, finalB[h].Stats, h)
		if a.Revision > 0 {
			revised++
		}
	}
	assert.Positive(t, revised, "held-back readings revise their hours")
}
