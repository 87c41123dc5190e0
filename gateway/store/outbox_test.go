package store

import (
	"math"
	"path/filepath"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/state"
)

// t0 is an hour start of the invented "Kestrel Ridge" orchard demo data.
var t0 = time.Date(2024, 7, 3, 10, 0, 0, 0, time.UTC)

func openTestDB(t testing.TB) *bbolt.DB {
	t.Helper()
	db, err := state.Open(filepath.Join(t.TempDir(), "state.db"))
	require.NoError(t, err)
	t.Cleanup(func() { require.NoError(t, db.Close()) })
	return db
}

func openTestOutbox(t testing.TB, db *bbolt.DB, opt OutboxOptions) *Outbox {
	t.Helper()
	if opt.Clock == nil {
		opt.Clock = func() time.Time { return t0.Add(2 * time.Hour) }
	}
	o, err := OpenOutbox(db, opt)
	require.NoError(t, err)
	return o
}

func enqueue(t testing.TB, db *bbolt.DB, o *Outbox, pts ...Point) {
	t.Helper()
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error { return o.Enqueue(tx, pts...) }))
}

func zonePt(zone string, h int, depletion float64) Point {
	return ZonePoint("kestrel-ridge", zone, t0.Add(time.Duration(h)*time.Hour), map[string]any{"depletion_mm": depletion})
}

func rawPt(h int) Point {
	return Point{Class: ClassRaw, Measurement: MeasurementRaw,
		Tags:   map[string]string{"site": "kestrel-ridge", "station": "north-block", "quantity": "air_temp"},
		Fields: map[string]any{"samples": 60, "mean_c": 21.5}, Time: t0.Add(time.Duration(h) * time.Hour)}
}

// pending returns the lines waiting in the outbox, oldest first.
func pending(t testing.TB, o *Outbox) []string {
	t.Helper()
	items, err := o.next(1<<30, 0, time.Time{})
	require.NoError(t, err)
	var lines []string
	for _, it := range items {
		lines = append(lines, string(it.line))
	}
	return lines
}

func TestEnqueueOrderAndRevision(t *testing.T) {
	db := openTestDB(t)
	o := openTestOutbox(t, db, OutboxOptions{})
	enqueue(t, db, o, zonePt("z1", 0, 10), zonePt("z2", 0, 20))
	enqueue(t, db, o, zonePt("z1", 1, 11))
	// A revision of z1 at hour 0 replaces the pending point and moves to the end.
	enqueue(t, db, o, zonePt("z1", 0, 12))

	depth, oldest := o.Stats()
	assert.Equal(t, 3, depth)
	assert.Equal(t, time.Duration(0), oldest, "clock is fixed, so nothing has waited")
	assert.Equal(t, []string{
		"zone_step,site=kestrel-ridge,zone=z2 depletion_mm=20 1720000800000000000",
		"zone_step,site=kestrel-ridge,zone=z1 depletion_mm=11 1720004400000000000",
		"zone_step,site=kestrel-ridge,zone=z1 depletion_mm=12 1720000800000000000",
	}, pending(t, o))

	// The history holds the latest revision once per series and hour.
	var got []float64
	require.NoError(t, o.History().Range(Filter{}, func(p Point) error {
		got = append(got, p.Fields["depletion_mm"].(float64))
		return nil
	}))
	assert.Equal(t, []float64{12, 20, 11}, got)
}

func TestEnqueueQuarantinesInvalidPoints(t *testing.T) {
	db := openTestDB(t)
	reg := prometheus.NewRegistry()
	o := openTestOutbox(t, db, OutboxOptions{Registerer: reg})
	bad := zonePt("z1", 0, math.NaN())
	enqueue(t, db, o, bad, zonePt("z2", 0, 5))

	assert.Equal(t, []string{"zone_step,site=kestrel-ridge,zone=z2 depletion_mm=5 1720000800000000000"}, pending(t, o))
	assert.Equal(t, 1.0, testutil.ToFloat64(o.metrics.quarantined))
	var qs []QuarantinedPoint
	require.NoError(t, o.Quarantine(func(q QuarantinedPoint) error { qs = append(qs, q); return nil }))
	require.Len(t, qs, 1)
	assert.Contains(t, qs[0].Reason, `field "depletion_mm": NaN is not a finite number`)
	assert.Equal(t, ClassZone, qs[0].Class)
}

func TestEnqueueRolledBackLeavesNothing(t *testing.T) {
	db := openTestDB(t)
	o := openTestOutbox(t, db, OutboxOptions{})
	err := db.Update(func(tx *bbolt.Tx) error {
		require.NoError(t, o.Enqueue(tx, zonePt("z1", 0, 1)))
		return assert.AnError
	})
	require.ErrorIs(t, err, assert.AnError)
	depth, _ := o.Stats()
	assert.Zero(t, depth)
	n, err := o.History().Count(Filter{})
	require.NoError(t, err)
	assert.Zero(t, n)
}

func TestCapDropsOldestRawOnly(t *testing.T) {
	db := openTestDB(t)
	reg := prometheus.NewRegistry()
	o := openTestOutbox(t, db, OutboxOptions{Cap: 4, Registerer: reg})
	enqueue(t, db, o, rawPt(0), zonePt("z1", 0, 1), rawPt(1), zonePt("z1", 1, 2))
	assert.True(t, o.NearCap())
	enqueue(t, db, o, zonePt("z1", 2, 3))
	lines := pending(t, o)
	require.Len(t, lines, 4)
	assert.NotContains(t, lines, Line(rawPt(0)), "oldest raw summary dropped first")
	assert.Contains(t, lines, Line(rawPt(1)))
	assert.Equal(t, 1.0, testutil.ToFloat64(o.metrics.dropped.WithLabelValues("raw")))

	// Only undroppable points left beyond the cap: they are all kept.
	enqueue(t, db, o, zonePt("z1", 3, 4), zonePt("z1", 4, 5))
	depth, _ := o.Stats()
	assert.Equal(t, 5, depth)
	assert.NotContains(t, pending(t, o), Line(rawPt(1)))
	assert.True(t, o.NearCap())
	assert.Equal(t, 2.0, testutil.ToFloat64(o.metrics.dropped.WithLabelValues("raw")))
	assert.Zero(t, testutil.ToFloat64(o.metrics.quarantined), "nothing quarantined")

	// Raw summaries never reach the local history.
	n, err := o.History().Count(Filter{Measurements: []string{MeasurementRaw}})
	require.NoError(t, err)
	assert.Zero(t, n)
}

func TestLocalOnlyKeepsHistoryOnly(t *testing.T) {
	db := openTestDB(t)
	o := openTestOutbox(t, db, OutboxOptions{LocalOnly: true})
	enqueue(t, db, o, zonePt("z1", 0, 1), rawPt(0))
	depth, _ := o.Stats()
	assert.Zero(t, depth)
	n, err := o.History().Count(Filter{})
	require.NoError(t, err)
	assert.Equal(t, 1, n)
}

// gauge reads one unlabelled gauge from a registry.
func gauge(t *testing.T, reg *prometheus.Registry, name string) float64 {
	t.Helper()
	mfs, err := reg.Gather()
	require.NoError(t, err)
	for _, mf := range mfs {
		if mf.GetName() == name {
			return mf.GetMetric()[0].GetGauge().GetValue()
		}
	}
	t.Fatalf("no metric %s", name)
	return 0
}

func TestStatsAndGauges(t *testing.T) {
	db := openTestDB(t)
	reg := prometheus.NewRegistry()
	now := t0
	o := openTestOutbox(t, db, OutboxOptions{Cap: 10, Registerer: reg, Clock: func() time.Time { return now }})
	assert.Zero(t, gauge(t, reg, "etpulse_outbox_oldest_age_seconds"))
	enqueue(t, db, o, zonePt("z1", 0, 1))
	now = now.Add(90 * time.Second)
	enqueue(t, db, o, zonePt("z1", 1, 1), zonePt("z1", 2, 1))
	now = now.Add(30 * time.Second)
	depth, oldest := o.Stats()
	assert.Equal(t, 3, depth)
	assert.Equal(t, 120*time.Second, oldest)
	assert.Equal(t, 3.0, gauge(t, reg, "etpulse_outbox_depth"))
	assert.Equal(t, 120.0, gauge(t, reg, "etpulse_outbox_oldest_age_seconds"))
	assert.Equal(t, 10.0, gauge(t, reg, "etpulse_outbox_cap"))
	assert.Zero(t, gauge(t, reg, "etpulse_outbox_near_cap"))
	enqueue(t, db, o, zonePt("z1", 3, 1), zonePt("z1", 4, 1), zonePt("z1", 5, 1), zonePt("z1", 6, 1), zonePt("z1", 7, 1))
	assert.Equal(t, 1.0, gauge(t, reg, "etpulse_outbox_near_cap"), "8 of 10 is the near-cap mark")
}
