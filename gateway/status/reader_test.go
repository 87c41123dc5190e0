package status_test

import (
	"context"
	"errors"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
	"etpulse/gateway/alert"
	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/state"
	"etpulse/gateway/status"
	"etpulse/gateway/store"
	"etpulse/gateway/zones"
	"etpulse/hourly"
)

// The invented farm of the demo (stations at UTC+10, two zones); the
// numbers below are made up to test the windows and sums, not the science.
var local = time.FixedZone("farm standard time", 10*3600)

func farm(t *testing.T) (*config.Config, *store.History) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "state.db")
	cfg, err := demo.New(demo.Options{Seed: 1}).Config(demo.ConfigOptions{BrokerURL: "tcp://127.0.0.1:1", ClientID: "t", StatePath: path})
	require.NoError(t, err)
	db, err := state.Open(path)
	require.NoError(t, err)
	t.Cleanup(func() { require.NoError(t, db.Close()) })
	outbox, _, err := store.Setup(db, config.Store{}, nil, nil, time.Now)
	require.NoError(t, err)
	return cfg, outbox.History()
}

func write(t *testing.T, h *store.History, pts ...store.Point) {
	t.Helper()
	n, refused, err := h.Write(context.Background(), pts)
	require.NoError(t, err)
	require.Empty(t, refused)
	require.Equal(t, len(pts), n)
}

// hour builds an orchard hour record's point as the store writes it.
func hour(site, station string, start time.Time, et float64, rev int) store.Point {
	rec := hourly.Record{Site: site, Station: station, Reference: hourly.Tall, Start: start, End: start.Add(time.Hour),
		LocalStart: start.In(local).Format("2006-01-02T15:04"), Revision: rev, Complete: true,
		Result: &hourly.Result{ET: et, Rso: 1, Day: true}}
	return store.HourPoints(rec)[0]
}

// TestReaderStationDays: today's ET sums the closed hours of the station's
// local (standard time) day, yesterday's the whole previous local day; the
// station page lists the last 72 hours with their revisions, fills and
// flags; another site's station of the same id is not mixed in.
func TestReaderStationDays(t *testing.T) {
	cfg, h := farm(t)
	now := time.Date(2026, 1, 14, 15, 30, 0, 0, local) // 05:30 UTC
	first := time.Date(2026, 1, 11, 8, 0, 0, 0, local)
	wantToday, wantYesterday := 0.0, 0.0
	var pts []store.Point
	for i := 0; ; i++ {
		start := first.Add(time.Duration(i) * time.Hour)
		if !start.Add(time.Hour).Before(now) {
			break
		}
		et := 0.05 + float64(i%7)/20
		p := hour(demo.Site, demo.Orchard, start, et, i%5/4)
		if i == 30 {
			p.Notes["fill"] = "rs-estimate"
			p.Notes["flags"] = "alert:stuck:solar;coverage"
		}
		pts = append(pts, p)
		switch start.Format(time.DateOnly) {
		case "2026-01-14":
			wantToday += et
		case "2026-01-13":
			wantYesterday += et
		}
	}
	pts = append(pts, hour("elsewhere", demo.Orchard, now.Add(-2*time.Hour).Truncate(time.Hour), 9, 0))
	write(t, h, pts...)
	seen := time.Date(2026, 1, 14, 15, 28, 0, 0, local)
	r, err := status.New(status.Options{Config: cfg, History: h, Now: func() time.Time { return now },
		LastSeen: func(site, station string) ([]pipeline.Seen, error) {
			return []pipeline.Seen{{Sensor: "air", Arrival: seen.Add(-time.Hour)}, {Sensor: "rh", Arrival: seen}}, nil
		}})
	require.NoError(t, err)

	ov, err := r.Overview()
	require.NoError(t, err)
	require.Len(t, ov.Stations, 3)
	o := ov.Stations[0]
	assert.Equal(t, demo.Orchard, o.Station)
	assert.Equal(t, "ETrs", o.ETLabel)
	assert.InDelta(t, wantToday, o.TodayET, 1e-9)
	assert.Equal(t, 15, o.TodayHours, "00:00-15:00 local closed")
	assert.InDelta(t, wantYesterday, o.YesterdayET, 1e-9)
	assert.Equal(t, 24, o.YesterdayHours)
	require.NotNil(t, o.AgeSeconds)
	assert.Equal(t, 120.0, *o.AgeSeconds, "age of the latest reading of any sensor")

	pg, err := r.Station(demo.Site, demo.Orchard)
	require.NoError(t, err)
	assert.Len(t, pg.Hours, 72, "the last 72 closed hours")
	assert.Equal(t, 1, pg.FilledHours)
	assert.Equal(t, 1, pg.FlaggedHours)
	revised := 0
	for _, x := range pg.Hours {
		if x.Revision > 0 {
			revised++
		}
		if x.Fill != "" {
			assert.Equal(t, []string{"alert:stuck:solar", "coverage"}, x.Flags)
		}
	}
	assert.Equal(t, revised, pg.RevisedHours)
	assert.Positive(t, revised)

	_, err = r.Station(demo.Site, "nope")
	assert.True(t, errors.Is(err, status.ErrNotFound), "%v", err)
	_, err = r.Station("elsewhere", demo.Orchard)
	assert.True(t, errors.Is(err, status.ErrNotFound), "%v", err)
}

// fakeZones stands in for the zone service's read side.
type fakeZones struct {
	st     []zones.ZoneStatus
	ledger []controllers.Command
	holds  controllers.Holds
}

func (f fakeZones) Status(time.Time) ([]zones.ZoneStatus, error) { return f.st, nil }
func (f fakeZones) Ledger(string) ([]controllers.Command, error) { return f.ledger, nil }
func (f fakeZones) Holds(string) (controllers.Holds, error)      { return f.holds, nil }

// TestReaderZone: the next run is the earliest planned command not yet
// expired; the hold in force is shown with its scope; steps of the last
// 14 local days are kept, summed per day, and hours with Ks < 1 counted
// as stress hours; past runs come latest first.
func TestReaderZone(t *testing.T) {
	cfg, h := farm(t)
	now := time.Date(2026, 1, 14, 15, 30, 0, 0, local)
	zone := "apple-block-4"
	step := func(at time.Time, kind string, f map[string]any) store.Point {
		p := store.ZonePoint(demo.Site, zone, at, f)
		p.Notes = map[string]string{"kind": kind}
		return p
	}
	write(t, h,
		step(time.Date(2025, 12, 31, 12, 0, 0, 0, local), "hour", map[string]any{"depletion_mm": 3.0, "etc_mm": 0.4, "ks": 1.0}), // before the window
		step(time.Date(2026, 1, 13, 12, 0, 0, 0, local), "hour", map[string]any{"depletion_mm": 10.0, "etc_mm": 0.5, "eff_rain_mm": 1.5, "ks": 1.0}),
		step(time.Date(2026, 1, 13, 13, 0, 0, 0, local), "hour", map[string]any{"depletion_mm": 50.0, "etc_mm": 0.6, "ks": 0.9}),
		step(time.Date(2026, 1, 13, 20, 5, 0, 0, local), "credit", map[string]any{"depletion_mm": 40.0, "irrigation_mm": 10.0}),
		step(time.Date(2026, 1, 14, 1, 0, 0, 0, local), "hour", map[string]any{"depletion_mm": 40.1, "etc_mm": 0.1, "ks": 1.0}),
		step(now.Add(-time.Hour), "hour", map[string]any{"depletion_mm": 41.0, "etc_mm": 0.2, "ks": 1.0}),
	)
	in := func(h time.Duration) time.Time { return now.Add(h) }
	fz := fakeZones{
		st: []zones.ZoneStatus{{Site: demo.Site, Zone: zone, State: controllers.State{Depletion: 41},
			Levels: controllers.Levels{TAW: 88, RAW: 44, Trigger: 8, Target: 2}}},
		ledger: []controllers.Command{
			{ID: "late", Zone: zone, State: controllers.Planned, Start: in(-5 * time.Hour), Expiry: in(-time.Hour), Minutes: 9, Cycles: 1},
			{ID: "second", Zone: zone, State: controllers.Planned, Start: in(6 * time.Hour), Expiry: in(7 * time.Hour), Minutes: 20, Cycle: 2, Cycles: 2},
			{ID: "first", Zone: zone, State: controllers.Planned, Start: in(5 * time.Hour), Expiry: in(6 * time.Hour), Minutes: 20, Cycle: 1, Cycles: 2},
			{ID: "other", Zone: "wheat-east", State: controllers.Planned, Start: in(time.Hour), Expiry: in(2 * time.Hour), Minutes: 5, Cycles: 1},
			{ID: "done", Zone: zone, State: controllers.Finished, Start: in(-20 * time.Hour), Minutes: 30, Cycle: 1, Cycles: 1,
				RunKnown: true, MinutesRun: 29, VolumeL: 11000, CreditMM: 10, Credited: true},
			{ID: "older", Zone: zone, State: controllers.Failed, Start: in(-44 * time.Hour), Minutes: 30, Cycle: 1, Cycles: 1},
		},
		holds: controllers.Holds{Zones: map[string]controllers.Hold{zone: {Until: in(3 * time.Hour), Reason: "spraying"}}},
	}
	r, err := status.New(status.Options{Config: cfg, History: h, Zones: fz, Now: func() time.Time { return now }})
	require.NoError(t, err)

	pg, err := r.Zone(demo.Site, zone)
	require.NoError(t, err)
	s := pg.Summary
	assert.Equal(t, demo.Orchard, s.Station)
	assert.Equal(t, 41.0, s.Depletion)
	assert.Equal(t, 8.0, s.Trigger)
	require.NotNil(t, s.NextRun)
	assert.Equal(t, status.PlanView{Start: in(5 * time.Hour), Minutes: 20, Cycles: 2}, *s.NextRun)
	require.NotNil(t, s.Hold)
	assert.Equal(t, "zone", s.Hold.Scope)
	assert.Equal(t, "spraying", s.Hold.Reason)
	assert.False(t, s.Stressed, "41 mm is within RAW 44 mm")

	require.Len(t, pg.Days, 14)
	assert.Equal(t, "2026-01-01", pg.Days[0].Date)
	assert.Equal(t, "2026-01-14", pg.Days[13].Date)
	assert.Len(t, pg.Steps, 5, "the step before the window is left out")
	d13 := pg.Days[12]
	assert.Equal(t, "2026-01-13", d13.Date)
	assert.InDelta(t, 1.1, d13.ETc, 1e-9)
	assert.InDelta(t, 1.5, d13.EffRain, 1e-9)
	assert.InDelta(t, 10, d13.Irrigation, 1e-9)
	assert.Equal(t, 1, d13.StressHours)
	assert.Equal(t, 1, pg.StressHours)

	require.Len(t, pg.Runs, 2)
	assert.Equal(t, "done", pg.Runs[0].ID)
	require.NotNil(t, pg.Runs[0].MinutesRun)
	assert.Equal(t, 29.0, *pg.Runs[0].MinutesRun)
	assert.Equal(t, 11000.0, *pg.Runs[0].VolumeL)
	assert.Equal(t, "older", pg.Runs[1].ID)
	assert.Nil(t, pg.Runs[1].MinutesRun)

	fz.holds = controllers.Holds{Site: controllers.Hold{Forever: true, Reason: "pump repair"}}
	r, err = status.New(status.Options{Config: cfg, History: h, Zones: fz, Now: func() time.Time { return now }})
	require.NoError(t, err)
	ov, err := r.Overview()
	require.NoError(t, err)
	require.Len(t, ov.Zones, 1)
	require.NotNil(t, ov.Zones[0].Hold)
	assert.Equal(t, "site", ov.Zones[0].Hold.Scope)
	assert.Nil(t, ov.Zones[0].Hold.Until, "a hold until released has no end")

	_, err = r.Zone(demo.Site, "nope")
	assert.True(t, errors.Is(err, status.ErrNotFound), "%v", err)
}

// TestReaderAlerts: active alerts come from the monitor, cleared ones from
// the local history within the last 7 days, latest first.
func TestReaderAlerts(t *testing.T) {
	cfg, h := farm(t)
	now := time.Date(2026, 1, 14, 15, 30, 0, 0, local)
	clearedAt := func(d time.Duration, kind string, active bool) store.Point {
		p := store.AlertPoint(demo.Site, demo.Paddock, "obs", kind, now.Add(-d), map[string]any{"active": active, "value": 3.0, "limit": 1.0})
		p.Notes = map[string]string{"severity": "warning", "message": kind + " evidence"}
		return p
	}
	write(t, h, clearedAt(8*24*time.Hour, "too-old", false), clearedAt(3*time.Hour, "first", false),
		clearedAt(2*time.Hour, "still-on", true), clearedAt(time.Hour, "second", false))
	active := []alert.Alert{{Key: alert.Key{Site: demo.Site, Station: demo.Orchard, Sensor: "solar", Quantity: hourly.Solar, Kind: "stuck"},
		Severity: alert.SeverityWarning, Message: "solar unchanged", Since: now.Add(-time.Hour), Updated: now}}
	r, err := status.New(status.Options{Config: cfg, History: h, Now: func() time.Time { return now }, Alerts: func() []alert.Alert { return active }})
	require.NoError(t, err)
	pg, err := r.Alerts()
	require.NoError(t, err)
	require.Len(t, pg.Active, 1)
	assert.Equal(t, "solar unchanged", pg.Active[0].Message)
	require.Len(t, pg.Cleared, 2)
	assert.Equal(t, "second", pg.Cleared[0].Kind)
	assert.Equal(t, "first", pg.Cleared[1].Kind)
	assert.Equal(t, "first evidence", pg.Cleared[1].Message)
	ov, err := r.Overview()
	require.NoError(t, err)
	assert.Equal(t, 1, ov.ActiveAlerts)
	assert.Len(t, ov.Stations[0].Alerts, 1, "the orchard's alert on the orchard")
	assert.Empty(t, ov.Stations[1].Alerts)
}
