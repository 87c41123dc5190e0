package quality

import (
	"encoding/json"
	"errors"
	"path/filepath"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/alert"
	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
	"etpulse/hourly"
)

// testConfig is the invented Brackenfold orchard with one station and one
// sensor per quantity.
func testConfig(respond config.Response) *config.Config {
	st := config.Station{
		ID: "orchard", Latitude: brackenfold.Latitude, Longitude: brackenfold.Longitude,
		Elevation: brackenfold.Elevation, UTCOffset: brackenfold.UTCOffset,
		Sensors: []config.Sensor{
			{ID: "t1", Channel: config.Channel{Quantity: hourly.AirTemp}},
			{ID: "h1", Channel: config.Channel{Quantity: hourly.RelHumidity}},
			{ID: "u1", Channel: config.Channel{Quantity: hourly.Wind}},
			{ID: "p1", Channel: config.Channel{Quantity: hourly.Solar}},
		},
	}
	c := &config.Config{Sites: []config.Site{{ID: "brackenfold", Stations: []config.Station{st}}}}
	c.Alerts.Stations = []config.StationAlerts{{Station: "orchard", Respond: map[hourly.Quantity]config.Response{hourly.Solar: respond}}}
	c.Alerts.ApplyDefaults()
	return c
}

type fixture struct {
	db  *bbolt.DB
	ob  *store.Outbox
	reg *prometheus.Registry
	mon *Monitor
	cfg *config.Config
	evs []Event
}

func newFixture(t testing.TB, cfg *config.Config, path string, now time.Time) *fixture {
	t.Helper()
	db, err := state.Open(path)
	require.NoError(t, err)
	t.Cleanup(func() { db.Close() })
	f := &fixture{db: db, reg: prometheus.NewRegistry(), cfg: cfg}
	f.ob, err = store.OpenOutbox(db, store.OutboxOptions{LocalOnly: true, Clock: func() time.Time { return now }})
	require.NoError(t, err)
	f.mon, err = New(Options{
		Config: cfg, DB: db, Outbox: f.ob, Registerer: f.reg,
		Clock:   clock.Func(func() time.Time { return now }),
		OnEvent: func(ev Event) { f.evs = append(f.evs, ev) },
	})
	require.NoError(t, err)
	return f
}

// record turns a synthetic hour into the record the pipeline would close.
func record(o HourObs) hourly.Record {
	rec := hourly.Record{
		Site: "brackenfold", Station: "orchard", Reference: hourly.Short,
		Start: o.Start, End: o.Start.Add(time.Hour), LocalStart: o.Local.Format("2006-01-02T15:04"),
		Complete: true, Stats: map[hourly.Quantity]hourly.Stats{},
		Result: &hourly.Result{SunElevation: o.SunElevation, Ra: o.Ra, Rso: o.Rso, Ea: o.Ea},
	}
	for q, s := range o.Q {
		rec.Stats[q] = hourly.Stats{Count: s.N, Min: s.Min, Max: s.Max, Mean: s.Mean, Coverage: 1}
	}
	return rec
}

func (f *fixture) closeHours(t *testing.T, hours []HourObs) {
	t.Helper()
	for _, o := range hours {
		require.NoError(t, f.db.Update(func(tx *bbolt.Tx) error { return f.mon.HandleHour(tx, record(o)) }))
	}
}

func (f *fixture) pendingPublish(t *testing.T) map[string]string {
	t.Helper()
	out := map[string]string{}
	require.NoError(t, f.db.View(func(tx *bbolt.Tx) error {
		return tx.Bucket(bucketPublish).ForEach(func(k, v []byte) error {
			out[string(k)] = string(v)
			return nil
		})
	}))
	return out
}

// alertPoints returns the solar-low points of the local history.
func (f *fixture) alertPoints(t *testing.T) []store.Point {
	t.Helper()
	var pts []store.Point
	require.NoError(t, f.ob.History().Range(store.Filter{Measurements: []string{store.MeasurementAlert}}, func(p store.Point) error {
		if p.Tags["kind"] == string(alert.KindSolarLow) {
			pts = append(pts, p)
		}
		return nil
	}))
	return pts
}

const solarLowTopic = "etpulse/brackenfold/alerts/orchard/hourly/solar/solar-low"

func TestMonitorSoiledPyranometerLifecycle(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state.db")
	f := newFixture(t, testConfig(config.RespondExclude), path, synthStart)
	soiled := weather{solarScale: 0.75}.hours(8 * 24)
	f.closeHours(t, soiled)

	// Raised once, with its evidence.
	var raised []Event
	for _, ev := range f.evs {
		if ev.Alert.Kind == alert.KindSolarLow {
			raised = append(raised, ev)
		}
	}
	require.Len(t, raised, 1, "raised once, not updated every hour with the same evidence")
	assert.Equal(t, EventRaised, raised[0].Type)
	assert.Contains(t, raised[0].Alert.Message, "max daily Rs/Rso over the last")
	active := f.mon.Active()
	require.Len(t, active, 1)
	assert.Equal(t, alert.Key{Site: "brackenfold", Station: "orchard", Sensor: alert.HourSubject, Quantity: hourly.Solar, Kind: alert.KindSolarLow}, active[0].Key)

	// Counted in metrics.
	assert.Equal(t, 1.0, kindTotal(t, f.reg, "etpulse_alerts_active", "solar-low"))
	assert.Equal(t, 1.0, kindTotal(t, f.reg, "etpulse_alerts_raised_total", "solar-low"))

	// Pending retained message, and a store point through the outbox.
	pub := f.pendingPublish(t)
	require.Contains(t, pub, solarLowTopic)
	var payload map[string]any
	require.NoError(t, json.Unmarshal([]byte(pub[solarLowTopic]), &payload))
	assert.Equal(t, "active", payload["state"])
	assert.Equal(t, "critical", payload["severity"])
	pts := f.alertPoints(t)
	require.Len(t, pts, 1)
	assert.Equal(t, store.ClassAlert, pts[0].Class)
	assert.Equal(t, map[string]string{"site": "brackenfold", "station": "orchard", "sensor": "hourly", "kind": "solar-low", "quantity": "solar"}, pts[0].Tags)
	assert.Equal(t, true, pts[0].Fields["active"])
	assert.Equal(t, true, pts[0].Fields["critical"])
	assert.InDelta(t, 0.735, pts[0].Fields["value"], 0.01)
	assert.Equal(t, "raised", pts[0].Notes["event"])
	assert.Contains(t, pts[0].Notes["message"], "max daily Rs/Rso")

	// The gate flags the next hour and excludes solar (configured response).
	next := soiled[len(soiled)-1].Start.Add(time.Hour)
	g := f.mon.Gate("brackenfold", "orchard", next)
	assert.Equal(t, []string{"alert:solar-low:solar"}, g.Flags)
	assert.Equal(t, []hourly.Quantity{hourly.Solar}, g.Exclude)
	assert.False(t, g.StopET)
	assert.Empty(t, f.mon.Gate("brackenfold", "orchard", soiled[0].Start).Flags, "hours before the alert are not flagged")

	// The state survives a restart.
	require.NoError(t, f.db.Close())
	f2 := newFixture(t, testConfig(config.RespondExclude), path, synthStart)
	require.Len(t, f2.mon.Active(), 1)
	assert.Equal(t, 1.0, kindTotal(t, f2.reg, "etpulse_alerts_active", "solar-low"))

	// The dome is cleaned. The records are now computed without solar (the
	// gate excludes it), so the monitor judges from the readings it observed.
	clean := weather{}.hours(11 * 24)[8*24:]
	for _, o := range clean {
		rec := record(o)
		solar := rec.Stats[hourly.Solar]
		delete(rec.Stats, hourly.Solar)
		f2.mon.ObserveSample("brackenfold", "orchard", hourly.Sample{Sensor: "p1", Quantity: hourly.Solar, Time: o.Start.Add(30 * time.Minute), Value: solar.Mean}, o.Start.Add(30*time.Minute))
		require.NoError(t, f2.db.Update(func(tx *bbolt.Tx) error { return f2.mon.HandleHour(tx, rec) }))
	}
	require.NoError(t, f2.mon.Sync())
	for _, a := range f2.mon.Active() {
		assert.NotEqual(t, alert.KindSolarLow, a.Kind, "cleared after the cleaning")
		// Only solar reported in this part of the test: the others are silent.
		assert.Equal(t, alert.KindSilence, a.Kind)
	}
	assert.Equal(t, 3.0, kindTotal(t, f2.reg, "etpulse_alerts_raised_total", "silence"), "raised once each, not updated")
	assert.Equal(t, 0.0, kindTotal(t, f2.reg, "etpulse_alerts_active", "solar-low"))
	assert.Equal(t, "", f2.pendingPublish(t)[solarLowTopic], "an empty retained message clears the topic")
	pts = f2.alertPoints(t)
	require.Len(t, pts, 2)
	assert.Equal(t, "cleared", pts[1].Notes["event"])
	assert.Equal(t, false, pts[1].Fields["active"])

	// The hours while the alert was active stay gated (revisions recompute
	// the same way); a later hour is clean.
	assert.Equal(t, []hourly.Quantity{hourly.Solar}, f2.mon.Gate("brackenfold", "orchard", next).Exclude)
	later := f2.mon.Gate("brackenfold", "orchard", clean[len(clean)-1].Start.Add(time.Hour))
	assert.NotContains(t, later.Flags, "alert:solar-low:solar")
	assert.Empty(t, later.Exclude)
}

func TestMonitorStopResponse(t *testing.T) {
	f := newFixture(t, testConfig(config.RespondStop), filepath.Join(t.TempDir(), "s.db"), synthStart)
	w := weather{solarScale: 1.4}.hours(2 * 24)
	f.closeHours(t, w)
	g := f.mon.Gate("brackenfold", "orchard", w[len(w)-1].Start.Add(time.Hour))
	assert.True(t, g.StopET)
	assert.Equal(t, []string{"alert:solar-high:solar"}, g.Flags)
	assert.Empty(t, g.Exclude)
}

func TestMonitorKeepResponseOnlyFlags(t *testing.T) {
	f := newFixture(t, testConfig(config.RespondKeep), filepath.Join(t.TempDir(), "k.db"), synthStart)
	w := weather{solarScale: 1.4}.hours(2 * 24)
	f.closeHours(t, w)
	g := f.mon.Gate("brackenfold", "orchard", w[len(w)-1].Start.Add(time.Hour))
	assert.False(t, g.StopET)
	assert.Empty(t, g.Exclude)
	assert.Equal(t, []string{"alert:solar-high:solar"}, g.Flags)
}

func TestMonitorNoAlertOnNormalWeeks(t *testing.T) {
	for name, w := range map[string]weather{
		"clear":  {},
		"cloudy": {clearness: cloudyWeek(3)},
		"arid":   {nightRHMax: 40, dayRHMin: 10, tMean: 29, tAmp: 10},
		"calm":   {windNight: 0},
	} {
		t.Run(name, func(t *testing.T) {
			f := newFixture(t, testConfig(config.RespondKeep), filepath.Join(t.TempDir(), "n.db"), synthStart)
			f.closeHours(t, w.hours(9*24))
			assert.Empty(t, f.mon.Active())
			assert.Empty(t, f.evs)
		})
	}
}

func TestMonitorReadingFaultsAndSilence(t *testing.T) {
	now := t0
	f := newFixture(t, testConfig(config.RespondKeep), filepath.Join(t.TempDir(), "r.db"), now)
	obs := func(sensor string, q hourly.Quantity, minute int, v float64) {
		at := t0.Add(time.Duration(minute) * time.Minute)
		f.mon.ObserveSample("brackenfold", "orchard", hourly.Sample{Sensor: sensor, Quantity: q, Time: at, Value: v}, at)
	}
	for m := range 10 {
		obs("t1", hourly.AirTemp, m, 20+0.1*float64(m))
		obs("h1", hourly.RelHumidity, m, 60)
		obs("u1", hourly.Wind, m, 2)
		obs("p1", hourly.Solar, m, 500)
	}
	obs("h1", hourly.RelHumidity, 10, 108)
	require.NoError(t, f.mon.Sync())
	require.Len(t, f.evs, 2, "the jump from 60 to 108 % is also a spike")
	assert.Equal(t, alert.Key{Site: "brackenfold", Station: "orchard", Sensor: "h1", Quantity: hourly.RelHumidity, Kind: alert.KindSpike}, f.evs[0].Alert.Key)
	assert.Equal(t, alert.Key{Site: "brackenfold", Station: "orchard", Sensor: "h1", Quantity: hourly.RelHumidity, Kind: alert.KindRHHigh}, f.evs[1].Alert.Key)
	assert.Contains(t, f.pendingPublish(t), "etpulse/brackenfold/alerts/orchard/h1/rel_humidity/rh-above-100")

	// The wind sensor goes silent; the others keep reporting.
	for m := 11; m < 40; m++ {
		obs("t1", hourly.AirTemp, m, 23)
		obs("h1", hourly.RelHumidity, m, 60)
		obs("p1", hourly.Solar, m, 500)
	}
	require.NoError(t, f.mon.Sync())
	var silent []Event
	for _, ev := range f.evs {
		if ev.Alert.Kind == alert.KindSilence {
			silent = append(silent, ev)
		}
	}
	require.Len(t, silent, 1)
	assert.Equal(t, "u1", silent[0].Alert.Sensor)
	assert.Contains(t, silent[0].Alert.Message, "no wind reading since 2026-06-03T18:09:00Z")

	// RH back to normal for the clear-after time, the wind sensor reports again.
	for m := 40; m < 75; m++ {
		obs("t1", hourly.AirTemp, m, 23)
		obs("h1", hourly.RelHumidity, m, 61)
		obs("p1", hourly.Solar, m, 500)
	}
	obs("u1", hourly.Wind, 75, 2.5)
	require.NoError(t, f.mon.Sync())
	assert.Empty(t, f.mon.Active())
	for _, k := range []string{"rh-above-100", "spike", "silence"} {
		assert.Equal(t, 1.0, kindTotal(t, f.reg, "etpulse_alerts_cleared_total", k), k)
		assert.Equal(t, 0.0, kindTotal(t, f.reg, "etpulse_alerts_active", k), k)
	}
}

func TestMonitorExternalRaiseAndClear(t *testing.T) {
	f := newFixture(t, testConfig(config.RespondKeep), filepath.Join(t.TempDir(), "e.db"), t0)
	key := alert.Key{Site: "brackenfold", Station: "orchard", Sensor: "block-4", Quantity: "et", Kind: "stale-et"}
	require.NoError(t, f.db.Update(func(tx *bbolt.Tx) error {
		return f.mon.Raise(tx, alert.Alert{Key: key, Message: "no valid ET for 6 hours", Since: t0})
	}))
	require.Len(t, f.mon.Active(), 1)
	assert.Equal(t, []string{"alert:stale-et:et"}, f.mon.Gate("brackenfold", "orchard", t0).Flags)
	require.NoError(t, f.mon.Clear(nil, key, t0.Add(time.Hour), "ET valid again"))
	assert.Empty(t, f.mon.Active())
	bad := key
	bad.Sensor = "a/b"
	assert.Error(t, f.mon.Raise(nil, alert.Alert{Key: bad}))
}

func TestMonitorRolledBackHourIsForgotten(t *testing.T) {
	f := newFixture(t, testConfig(config.RespondKeep), filepath.Join(t.TempDir(), "rb.db"), synthStart)
	hours := weather{}.hours(3)
	f.closeHours(t, hours[:1])
	err := f.db.Update(func(tx *bbolt.Tx) error {
		require.NoError(t, f.mon.HandleHour(tx, record(hours[1])))
		return errors.New("another handler failed")
	})
	require.Error(t, err)
	f.closeHours(t, hours[2:])
	id := stationID{"brackenfold", "orchard"}
	w := f.mon.windows[id]
	require.Len(t, w, 2)
	assert.Equal(t, hours[0].Start, w[0].Start)
	assert.Equal(t, hours[2].Start, w[1].Start)
	require.NoError(t, f.db.View(func(tx *bbolt.Tx) error {
		stored, err := readWindow(tx.Bucket(bucketHours).Bucket([]byte("brackenfold/orchard")))
		require.NoError(t, err)
		assert.Len(t, stored, 2)
		return nil
	}))
}

func TestMonitorSilenceSurvivesRestart(t *testing.T) {
	path := filepath.Join(t.TempDir(), "silence.db")
	f := newFixture(t, testConfig(config.RespondKeep), path, t0)
	f.mon.CheckSilence(t0.Add(20 * time.Minute))
	require.NoError(t, f.mon.Sync())
	require.Len(t, f.mon.Active(), 4, "no sensor ever reported")
	require.NoError(t, f.db.Close())

	// Restarted an hour later: the sensors are still silent since t0, so
	// nothing clears and nothing is raised again.
	f2 := newFixture(t, testConfig(config.RespondKeep), path, t0.Add(time.Hour))
	f2.mon.CheckSilence(t0.Add(time.Hour + time.Minute))
	require.NoError(t, f2.mon.Sync())
	assert.Len(t, f2.mon.Active(), 4)
	assert.Empty(t, f2.evs)
	assert.Equal(t, 0.0, kindTotal(t, f2.reg, "etpulse_alerts_raised_total", "silence"))
}

// A reading the gateway keeps in its journal until a checkpoint is heard
// at once (Heard) and observed at the checkpoint with its arrival time: a
// sensor reporting every 10 min is not taken for silent (limit 15 min)
// while its readings wait for a 30-minute checkpoint.
func TestMonitorHeardBeforeCheckpointIsNotSilent(t *testing.T) {
	f := newFixture(t, testConfig(config.RespondKeep), filepath.Join(t.TempDir(), "h.db"), t0)
	at := func(minute int) time.Time { return t0.Add(time.Duration(minute) * time.Minute) }
	smp := func(minute int) hourly.Sample {
		return hourly.Sample{Sensor: "t1", Quantity: hourly.AirTemp, Time: at(minute), Value: 20}
	}
	silentT1 := func() []alert.Alert {
		var out []alert.Alert
		for _, a := range f.mon.Active() {
			if a.Sensor == "t1" && a.Kind == alert.KindSilence {
				out = append(out, a)
			}
		}
		return out
	}
	f.mon.ObserveSample("brackenfold", "orchard", smp(0), at(0))
	for _, m := range []int{10, 20} {
		f.mon.Heard("brackenfold", "orchard", smp(m), at(m))
	}
	f.mon.CheckSilence(at(29))
	require.NoError(t, f.mon.Sync())
	assert.Empty(t, silentT1(), "heard at 10 and 20 min, silent only after 35")
	// The checkpoint at 30 min observes them with their arrival times.
	for _, m := range []int{10, 20} {
		f.mon.ObserveSample("brackenfold", "orchard", smp(m), at(m))
	}
	f.mon.CheckSilence(at(36))
	require.NoError(t, f.mon.Sync())
	got := silentT1()
	require.Len(t, got, 1, "nothing heard since 20 min")
	assert.Contains(t, got[0].Message, "no air_temp reading since 2026-06-03T18:20:00Z")
}

// A spike's alert is written in the transaction that stores the reading
// (CommitObserved), not later by Sync: a kill between the two cannot keep
// the reading and lose its alert. A transaction that does not commit gives
// the events back, and Sync writes them.
func TestMonitorCommitsObservedAlertsWithTheirReadings(t *testing.T) {
	path := filepath.Join(t.TempDir(), "c.db")
	f := newFixture(t, testConfig(config.RespondKeep), path, t0)
	obs := func(minute int, v float64) {
		at := t0.Add(time.Duration(minute) * time.Minute)
		f.mon.ObserveSample("brackenfold", "orchard", hourly.Sample{Sensor: "h1", Quantity: hourly.RelHumidity, Time: at, Value: v}, at)
	}
	persisted := func() []string {
		var out []string
		require.NoError(t, f.db.View(func(tx *bbolt.Tx) error {
			return tx.Bucket(state.BucketAlerts).ForEach(func(k, _ []byte) error {
				out = append(out, string(k))
				return nil
			})
		}))
		return out
	}
	spike := "brackenfold/orchard/h1/rel_humidity/spike"

	// A transaction that fails: the events come back.
	obs(0, 60)
	obs(1, 95) // 35 % in a minute, limit 15
	failed := errors.New("disk gone")
	err := f.db.Update(func(tx *bbolt.Tx) error {
		require.NoError(t, f.mon.CommitObserved(tx))
		return failed
	})
	require.ErrorIs(t, err, failed)
	f.mon.AbortObserved()
	assert.NotContains(t, persisted(), spike)

	// The next transaction that stores readings writes them.
	require.NoError(t, f.db.Update(func(tx *bbolt.Tx) error { return f.mon.CommitObserved(tx) }))
	assert.Contains(t, persisted(), spike, "written with the readings' transaction, before any Sync")
	require.Len(t, f.evs, 1, "the event is reported once, when its transaction commits")
	require.NoError(t, f.mon.Sync())
	assert.Len(t, f.evs, 1, "Sync has nothing left to write")
}
