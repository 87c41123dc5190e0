package gateway

import (
	"context"
	"fmt"
	"log/slog"
	"path/filepath"
	"testing"
	"testing/synctest"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/alert"
	gwclock "etpulse/gateway/clock"
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
	mon, err := quality.New(quality.Options{Config: cfg, DB: db, Clock: gwclock.Func(clock)})
	require.NoError(t, err)
	w := &outboxWatch{outbox: small, alerts: mon, sites: []string{"lowfield"}, clock: gwclock.Func(clock), log: slog.New(slog.DiscardHandler)}

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
	assert.Equal(t, alert.OutboxKey("lowfield"), active[0].Key)
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

// The watch's loop checks the outbox once a minute on its clock: inside a
// synctest bubble (clock.Real is the bubble's clock) points that push the
// outbox near its cap raise the alert at the next minute's check, not before.
func TestOutboxWatchLoopChecksEveryMinute(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		cfg, err := config.Load(filepath.Join("..", "testdata", "config", "minimal.yaml"))
		require.NoError(t, err)
		db, err := state.Open(filepath.Join(t.TempDir(), "s.db"))
		require.NoError(t, err)
		defer db.Close()
		ob, err := store.OpenOutbox(db, store.OutboxOptions{Cap: 10, Clock: time.Now})
		require.NoError(t, err)
		mon, err := quality.New(quality.Options{Config: cfg, DB: db})
		require.NoError(t, err)
		w := &outboxWatch{outbox: ob, alerts: mon, sites: []string{"lowfield"}, clock: gwclock.Real, log: slog.New(slog.DiscardHandler)}
		enqueue := func(from, n int) {
			require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
				for i := from; i < from+n; i++ {
					if err := ob.Enqueue(tx, store.ZonePoint("lowfield", fmt.Sprintf("z%d", i), time.Now(), map[string]any{"depletion_mm": 1.0})); err != nil {
						return err
					}
				}
				return nil
			}))
		}
		enqueue(0, 7)
		ctx, cancel := context.WithCancel(context.Background())
		done := make(chan error, 1)
		go func() { done <- w.Run(ctx) }()
		synctest.Wait()
		assert.Empty(t, mon.Active(), "7 of 10 is below the near-cap share")

		time.Sleep(30 * time.Second)
		enqueue(7, 2)
		time.Sleep(29 * time.Second)
		synctest.Wait()
		assert.Empty(t, mon.Active(), "no check before the minute is up")

		time.Sleep(time.Second)
		synctest.Wait()
		require.Len(t, mon.Active(), 1, "the check at the minute raises it")
		assert.Equal(t, alert.OutboxKey("lowfield"), mon.Active()[0].Key)
		cancel()
		require.NoError(t, <-done)
	})
}
