package gateway

import (
	"fmt"
	"log/slog"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/config"
	"etpulse/gateway/quality"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
)

// The outbox watch raises outbox-near-cap while the outbox holds its
// near-cap share (0.8 by default) and clears it once below.
func TestOutboxWatchRaisesAndClears(t *testing.T) {
	cfg, err := config.Load(filepath.Join("..", "testdata", "config", "minimal.yaml"))
	require.NoError(t, err)
	db, err := state.Open(filepath.Join(t.TempDir(), "s.db"))
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	now := time.Date(2026, 7, 14, 12, 0, 0, 0, time.UTC)
	clock := func() time.Time { return now }

	small, err := store.OpenOutbox(db, store.OutboxOptions{Cap: 10, Clock: clock})
	require.NoError(t, err)
	mon, err := quality.New(quality.Options{Config: cfg, DB: db, Clock: clock})
	require.NoError(t, err)
	w := &outboxWatch{outbox: small, alerts: mon, sites: []string{"lowfield"}, clock: clock, log: slog.New(slog.DiscardHandler)}

	queued := 0
	enqueue := func(n int) {
		require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
			for range n {
				// A distinct series each: the outbox keeps one point per
				// measurement, tags and time.
				queued++
				p := store.ZonePoint("lowfield", fmt.Sprintf("z%d", queued), now, map[string]any{"depletion_mm": 1.0})
				if err := small.Enqueue(tx, p); err != nil {
					return err
				}
			}
			return nil
		}))
	}
	enqueue(7)
	require.NoError(t, w.check(now))
	assert.Empty(t, mon.Active(), "7 of 10 is below the near-cap share")

	enqueue(2)
	require.NoError(t, w.check(now))
	active := mon.Active()
	require.Len(t, active, 1)
	assert.Equal(t, quality.OutboxKey("lowfield"), active[0].Key)
	assert.Contains(t, active[0].Message, "store outbox holds 9 points of its cap 10")
	assert.Equal(t, "x/lowfield/alerts/gateway/outbox/points/outbox-near-cap", quality.Topic("x", active[0].Key))

	// The same points against a larger cap: no longer near it, cleared.
	large, err := store.OpenOutbox(db, store.OutboxOptions{Cap: 1000, Clock: clock})
	require.NoError(t, err)
	w.outbox = large
	now = now.Add(time.Hour)
	require.NoError(t, w.check(now))
	assert.Empty(t, mon.Active())
}
