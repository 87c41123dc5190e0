package state_test

import (
	"context"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/state"
	"etpulse/gateway/store"
)

// The committed files of older versions (testdata/state/gen/gen.sh makes
// them): two demo days of tallowwood in versions 1 and 2, whose history
// holds hour points with the names before version 3 and zone faults in
// sensor_alert (their outbox holds only zone steps and a command), and
// v2-names.db, whose outbox holds those points too, pending, with a revised
// hour, an estimated solar capped at clear sky, raw summaries and both
// forms of an old zone fault.
var oldFiles = []string{
	"../../testdata/state/v1-tallowwood.db",
	"../../testdata/state/v2-tallowwood.db",
	"../../testdata/state/v2-names.db",
}

// oldNames are the hour fields before version 3 and their new names;
// measured is the old name of the measured solar (rs_mj_m2 names the solar
// used since version 3).
var oldNames = [][2]string{
	{"t_air_c", "air_temp_c"}, {"u2_m_s", "wind_2m_m_s"}, {"p_kpa", "pressure_kpa"},
	{"sun_elev_rad", "sun_elevation_rad"}, {"rn_measured", "net_rad_measured"}, {"g_measured", "soil_heat_measured"},
}

// storedPoints reads the points of the history (by key) and of the outbox
// (by sequence, without the enqueue time) with the frozen codec.
func storedPoints(t *testing.T, path string) (history, outbox []state.PointV1) {
	t.Helper()
	db, err := bbolt.Open(path, 0o600, &bbolt.Options{ReadOnly: true})
	require.NoError(t, err)
	defer db.Close()
	require.NoError(t, db.View(func(tx *bbolt.Tx) error {
		if err := tx.Bucket(state.BucketHistory).ForEach(func(_, v []byte) error {
			p, err := state.DecodePointV1(v)
			history = append(history, p)
			return err
		}); err != nil {
			return err
		}
		return tx.Bucket(state.BucketOutbox).ForEach(func(_, v []byte) error {
			p, err := state.DecodePointV1(v[8:])
			outbox = append(outbox, p)
			return err
		})
	}))
	return history, outbox
}

// wantV3 is what the migration must make of an old point: the hour fields
// renamed (the measured solar to solar_mj_m2, the solar used, which the old
// point determines, in rs_mj_m2) and zone faults in zone_alert with the
// tags site, zone, quantity, kind.
func wantV3(p state.PointV1) store.Point {
	out := store.Point{Class: store.Class(p.Class), Measurement: p.Measurement, Tags: map[string]string{},
		Fields: map[string]any{}, Time: time.Unix(0, p.Time).UTC(), Notes: p.Notes}
	for k, v := range p.Tags {
		out.Tags[k] = v
	}
	for k, v := range p.Fields {
		out.Fields[k] = v
	}
	switch {
	case p.Measurement == "et_hour":
		for _, n := range oldNames {
			if v, ok := out.Fields[n[0]]; ok {
				delete(out.Fields, n[0])
				out.Fields[n[1]] = v
			}
		}
		if v, ok := p.Fields["rs_mj_m2"].(float64); ok {
			out.Fields["solar_mj_m2"] = v
			out.Fields["rs_mj_m2"] = max(v, 0) // hourly.Compute floors the solar at 0
			if p.Notes["flags"] == "solar:capped-at-rso" {
				out.Fields["rs_mj_m2"] = p.Fields["rso_mj_m2"] // and caps an estimate at Rso
			}
		}
	case p.Measurement == "sensor_alert" && p.Tags["station"] == "zones":
		out.Measurement = "zone_alert"
		out.Tags = map[string]string{"site": p.Tags["site"], "zone": p.Tags["sensor"], "quantity": p.Tags["quantity"], "kind": p.Tags["kind"]}
	case p.Measurement == "sensor_alert" && p.Tags["zone"] != "":
		out.Measurement = "zone_alert"
		out.Tags = map[string]string{"site": p.Tags["site"], "zone": p.Tags["zone"], "kind": p.Tags["kind"]}
	}
	if len(out.Notes) == 0 {
		out.Notes = nil
	}
	return out
}

func pointID(p store.Point) string {
	return store.Line(store.Point{Measurement: p.Measurement, Tags: p.Tags, Fields: map[string]any{"x": true}, Time: p.Time})
}

// assertNewNames fails for a point that still carries a name from before
// version 3.
func assertNewNames(t *testing.T, p store.Point, where string) {
	t.Helper()
	for _, n := range oldNames {
		assert.NotContains(t, p.Fields, n[0], "%s: %s", where, pointID(p))
	}
	if p.Measurement == "et_hour" {
		_, hasET := p.Fields["et_mm"]
		_, hasSolar := p.Fields["solar_mj_m2"]
		assert.Equal(t, hasET, hasSolar, "%s: a computed hour has its measured solar as solar_mj_m2: %s", where, pointID(p))
	}
	if p.Measurement == "sensor_alert" {
		assert.NotEqual(t, "zones", p.Tags["station"], "%s: zone fault left in sensor_alert: %s", where, pointID(p))
		assert.NotContains(t, p.Tags, "zone", "%s: zone fault left in sensor_alert: %s", where, pointID(p))
	}
}

// TestMigrateStoredPoints: every committed older file opens at the current
// version with its local history and outbox in the version-3 names: no
// field or measurement of the old list remains, every value is the one the
// file held (read with the frozen codec before the migration), zone faults
// are in zone_alert; the outbox keeps its depth, a revision of a migrated
// point replaces it (its series key followed it), and the outbox drains
// the migrated points into a sink.
func TestMigrateStoredPoints(t *testing.T) {
	for _, file := range oldFiles {
		t.Run(filepath.Base(file), func(t *testing.T) {
			path := state.CopyTo(t, file)
			oldHistory, oldOutbox := storedPoints(t, path)
			require.NotEmpty(t, oldHistory)
			require.NotEmpty(t, oldOutbox)

			db, err := state.Open(path)
			require.NoError(t, err)
			defer db.Close()
			now := time.Date(2026, 2, 4, 0, 0, 0, 0, time.UTC)
			clock := func() time.Time { return now }
			ob, err := store.OpenOutbox(db, store.OutboxOptions{Clock: clock})
			require.NoError(t, err)

			got := map[string]store.Point{}
			require.NoError(t, ob.History().Range(store.Filter{}, func(p store.Point) error {
				assertNewNames(t, p, "history")
				got[pointID(p)] = p
				return nil
			}))
			assert.Len(t, got, len(oldHistory), "no point lost or merged")
			zoneFaults := 0
			for _, old := range oldHistory {
				want := wantV3(old)
				if want.Measurement == "zone_alert" {
					zoneFaults++
				}
				if assert.Contains(t, got, pointID(want)) {
					p := got[pointID(want)]
					assert.Equal(t, want.Fields, p.Fields, pointID(want))
					assert.Equal(t, want.Notes, p.Notes, pointID(want))
					assert.Equal(t, want.Class, p.Class, pointID(want))
				}
			}
			assert.Positive(t, zoneFaults, "the file holds zone faults")

			depth, _ := ob.Stats()
			require.Equal(t, len(oldOutbox), depth, "the outbox keeps its count")
			// A revision of a migrated pending point replaces it: the
			// series key in outbox/series followed the point.
			last := wantV3(oldOutbox[len(oldOutbox)-1])
			revised := last
			revised.Fields = map[string]any{"revised": true}
			require.NoError(t, db.Update(func(tx *bbolt.Tx) error { return ob.Enqueue(tx, revised) }))
			depth, _ = ob.Stats()
			require.Equal(t, len(oldOutbox), depth, "the revision replaced the pending point")

			archiveDB, err := state.Open(filepath.Join(t.TempDir(), "archive.db"))
			require.NoError(t, err)
			defer archiveDB.Close()
			archive, err := store.OpenOutbox(archiveDB, store.OutboxOptions{Clock: clock, LocalOnly: true})
			require.NoError(t, err)
			w, err := store.NewWriter(ob, store.WriterOptions{Sink: archive.History(), Registerer: prometheus.NewRegistry()})
			require.NoError(t, err)
			require.NoError(t, w.Flush(context.Background()))
			depth, _ = ob.Stats()
			assert.Zero(t, depth, "the outbox drained")
			drained := map[string]store.Point{}
			require.NoError(t, archive.History().Range(store.Filter{}, func(p store.Point) error {
				assertNewNames(t, p, "drained")
				drained[pointID(p)] = p
				return nil
			}))
			for i, old := range oldOutbox {
				want := wantV3(old)
				if want.Class == store.ClassRaw {
					continue // the history keeps no raw summaries
				}
				if i == len(oldOutbox)-1 {
					want = revised
				}
				if assert.Contains(t, drained, pointID(want)) {
					assert.Equal(t, want.Fields, drained[pointID(want)].Fields, pointID(want))
				}
			}
		})
	}
}

// TestMigrateNamesFixture: the hand-made version-2 file holds what the
// migration has to get right, and it comes out as the version-3 gateway
// writes it: the used solar of a capped estimate is Rso, of a slightly
// negative reading 0; both old forms of a zone fault are zone_alert; a
// station's alert stays sensor_alert.
func TestMigrateNamesFixture(t *testing.T) {
	path := state.CopyTo(t, oldFiles[2])
	db, err := state.Open(path)
	require.NoError(t, err)
	defer db.Close()
	h, err := store.OpenHistory(db)
	require.NoError(t, err)
	t0 := time.Date(2026, 2, 3, 0, 0, 0, 0, time.UTC)
	type solar struct{ measured, used any }
	hours := map[time.Time]solar{}
	var alerts []string
	require.NoError(t, h.Range(store.Filter{}, func(p store.Point) error {
		switch p.Measurement {
		case "et_hour":
			hours[p.Time] = solar{p.Fields["solar_mj_m2"], p.Fields["rs_mj_m2"]}
		default:
			alerts = append(alerts, store.Line(store.Point{Measurement: p.Measurement, Tags: p.Tags, Fields: map[string]any{"x": true}, Time: p.Time}))
		}
		return nil
	}))
	// The values the generator (testdata/state/gen/names.go.txt) wrote.
	assert.Equal(t, map[time.Time]solar{
		t0:                      {1.875, 1.875},    // revision 1
		t0.Add(time.Hour):       {3.125, 2.4375},   // estimate capped at Rso
		t0.Add(-10 * time.Hour): {-0.0015625, 0.0}, // floored at 0
		t0.Add(2 * time.Hour):   {nil, nil},        // incomplete: not computed
	}, hours)
	ns := func(d time.Duration) string { return " x=true " + strconv.FormatInt(t0.Add(d).UnixNano(), 10) }
	assert.ElementsMatch(t, []string{
		"zone_alert,kind=valve-no-report,quantity=valve,site=wattlegrove,zone=citrus-3" + ns(90*time.Minute),
		"sensor_alert,kind=calm-run,quantity=wind,sensor=ridge.wind,site=wattlegrove,station=ridge" + ns(3*time.Hour),
		"zone_alert,kind=zone-et-stale,site=wattlegrove,zone=citrus-3" + ns(4*time.Hour),
	}, alerts)
}
