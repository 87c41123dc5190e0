package store

import (
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/state"
)

// stateYear fills a new state file with the hourly records of stations
// stations for days days, as the pipeline hands them to the outbox at each
// hour close (one transaction per hour for all stations), with the
// history's hourly prune at retention, and returns the file's path.
func stateYear(t testing.TB, stations, days int, retention time.Duration) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "state.db")
	db, err := state.Open(path)
	require.NoError(t, err)
	db.NoSync = true // the figures are sizes, not durability
	start := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
	now := start
	o, err := OpenOutbox(db, OutboxOptions{LocalOnly: true, HistoryRetention: retention, Clock: func() time.Time { return now }})
	require.NoError(t, err)
	rec := example19Record()
	for h := range days * 24 {
		hour := start.Add(time.Duration(h) * time.Hour)
		now = hour.Add(time.Hour + 5*time.Minute)
		require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
			for s := range stations {
				r := rec
				r.Station = "st-" + strconv.Itoa(s)
				r.Start, r.End = hour, hour.Add(time.Hour)
				r.Inputs.Start = hour
				r.LocalStart = hour.Format("2006-01-02T15:04")
				if err := o.HandleHour(tx, r); err != nil {
					return err
				}
			}
			return nil
		}))
		_, err := o.History().Prune(now)
		require.NoError(t, err)
	}
	require.NoError(t, db.Close())
	return path
}

func usage(t testing.TB, path string) state.Usage {
	t.Helper()
	db, err := state.Open(path)
	require.NoError(t, err)
	defer db.Close()
	u, err := state.SpaceUsage(db)
	require.NoError(t, err)
	return u
}

func historyCount(t testing.TB, path string) int {
	t.Helper()
	db, err := state.OpenReadOnly(path)
	require.NoError(t, err)
	defer db.Close()
	h, err := OpenHistory(db)
	require.NoError(t, err)
	n, err := h.Count(Filter{})
	require.NoError(t, err)
	return n
}

// TestStateFileBoundedByRetention: with hourly records for longer than the
// retention, the history holds only the retention's hours, the file stops
// at what that needs plus bbolt's free pages, and compaction returns the
// free pages.
func TestStateFileBoundedByRetention(t *testing.T) {
	const stations, days = 3, 20
	retention := 7 * 24 * time.Hour
	path := stateYear(t, stations, days, retention)

	// Points whose time (the hour's start) is at or after now-retention
	// are kept. now is 5 minutes past the newest hour's end, so the hour
	// that started 7 days before that end has just gone: 7*24-1 hours.
	kept := stations * (7*24 - 1)
	assert.Equal(t, kept, historyCount(t, path))

	before := usage(t, path)
	res, err := state.Compact(path, nil)
	require.NoError(t, err)
	assert.Equal(t, before, res.Before)
	assert.LessOrEqual(t, res.After.FileBytes, before.FileBytes, "compaction never grows the file (the history fills its pages, so little is left to return)")
	assert.Equal(t, kept, historyCount(t, path))

	// Twice the days under the same retention: the file stays about the
	// same size (it does not grow with the days kept before the cutoff).
	longer := stateYear(t, stations, 2*days, retention)
	grown := usage(t, longer)
	assert.Less(t, float64(grown.InUseBytes()), 1.25*float64(before.InUseBytes()),
		"in-use bytes after %d and %d days: %d, %d", days, 2*days, before.InUseBytes(), grown.InUseBytes())
}

// TestStateFileSizePerStationYear measures the state file after a year of
// hourly records for ETPULSE_STATE_SIZE_STATIONS stations (the default
// retention of 366 days; ETPULSE_STATE_SIZE_DAYS runs longer, so that the
// retention prunes), and after compaction.
// It prints the figures README.md quotes; it runs only when asked:
//
//	ETPULSE_STATE_SIZE_STATIONS=20 go test ./gateway/store/ -run TestStateFileSizePerStationYear -v
func TestStateFileSizePerStationYear(t *testing.T) {
	n, _ := strconv.Atoi(os.Getenv("ETPULSE_STATE_SIZE_STATIONS"))
	if n <= 0 {
		t.Skip("set ETPULSE_STATE_SIZE_STATIONS to measure")
	}
	days := 366
	if d, _ := strconv.Atoi(os.Getenv("ETPULSE_STATE_SIZE_DAYS")); d > 0 {
		days = d
	}
	path := stateYear(t, n, days, 0)
	before := usage(t, path)
	res, err := state.Compact(path, nil)
	require.NoError(t, err)
	pts := historyCount(t, path)
	perStation := func(b int64) string {
		kept := min(days, 366) // days of history the default retention keeps
		return fmt.Sprintf("%.2f MiB", float64(b)/float64(n)/(1<<20)*366/float64(kept))
	}
	t.Logf("%d stations, %d days, %d history points (%d B in use per point)", n, days, pts, res.After.InUseBytes()/int64(pts))
	t.Logf("before compaction: file %d B, in use %d B (file/in-use %.2f)", before.FileBytes, before.InUseBytes(), float64(before.FileBytes)/float64(before.InUseBytes()))
	t.Logf("after compaction:  file %d B, in use %d B", res.After.FileBytes, res.After.InUseBytes())
	t.Logf("per station-year: %s before, %s after compaction", perStation(before.FileBytes), perStation(res.After.FileBytes))
}
