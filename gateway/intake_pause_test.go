package gateway

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"
	berrors "go.etcd.io/bbolt/errors"

	"etpulse/gateway/alert"
	"etpulse/gateway/quality"
)

// Which state-file write errors pause intake, wrapped as bbolt and the
// pipeline wrap them.
func TestStateDiskFault(t *testing.T) {
	wrap := func(e error) error {
		return fmt.Errorf("ingest: %w", &fs.PathError{Op: "write", Path: "s.db", Err: e})
	}
	for _, c := range []struct {
		err  error
		kind alert.Kind
	}{
		{wrap(syscall.ENOSPC), alert.KindStateDiskFull},
		{wrap(syscall.EDQUOT), alert.KindStateDiskFull},
		{wrap(syscall.EIO), alert.KindStateWriteError},
		{wrap(syscall.EROFS), alert.KindStateWriteError},
		{fmt.Errorf("ingest: %w", berrors.ErrDatabaseNotOpen), ""},
		{wrap(syscall.EBADF), ""},
		{errors.New("ingest: station hour unreadable"), ""},
	} {
		kind, ok := stateDiskFault(c.err)
		assert.Equal(t, c.kind, kind, "%v", c.err)
		assert.Equal(t, c.kind != "", ok, "%v", c.err)
	}
}

// fullRaiser is an alert monitor whose state file refuses writes until
// writable is set.
type fullRaiser struct {
	mu       sync.Mutex
	writable bool
	raised   []alert.Alert
	cleared  []alert.Key
}

func (r *fullRaiser) Raise(_ *bbolt.Tx, a alert.Alert) error {
	r.mu.Lock()
	defer r.mu.Unlock()
	if !r.writable {
		return fmt.Errorf("alert %s: write s.db: %w", a.Key, syscall.ENOSPC)
	}
	r.raised = append(r.raised, a)
	return nil
}

func (r *fullRaiser) Clear(_ *bbolt.Tx, key alert.Key, _ time.Time, _ string) error {
	r.mu.Lock()
	defer r.mu.Unlock()
	if !r.writable {
		return fmt.Errorf("alert %s: write s.db: %w", key, syscall.ENOSPC)
	}
	r.cleared = append(r.cleared, key)
	return nil
}

type pubRecord struct {
	topic    string
	retained bool
	payload  string
}

type memPublisher struct {
	mu   sync.Mutex
	msgs []pubRecord
}

func (p *memPublisher) Publish(_ context.Context, topic string, _ byte, retained bool, payload []byte) error {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.msgs = append(p.msgs, pubRecord{topic, retained, string(payload)})
	return nil
}

// When the monitor cannot persist the alert either (same full disk), the
// pause publishes it directly, retained; at resume it is raised through the
// monitor and cleared there, so the monitor's clear replaces it.
func TestIntakePauseAlertsWithoutStateFile(t *testing.T) {
	reg := prometheus.NewRegistry()
	pub := &memPublisher{}
	p, err := newIntakePause(slog.New(slog.DiscardHandler), reg, "/x/s.db", "farm", []string{"north", "south"}, pub)
	require.NoError(t, err)
	mon := &fullRaiser{}
	p.alerts = mon
	t0 := time.Date(2025, 7, 1, 12, 0, 0, 0, time.UTC)
	cause := fmt.Errorf("ingest: %w", &fs.PathError{Op: "write", Path: "/x/s.db", Err: syscall.ENOSPC})

	require.NoError(t, p.check(context.Background()))
	p.hold(t0, alert.KindStateDiskFull, cause, 37, time.Second)
	p.hold(t0.Add(time.Second), alert.KindStateDiskFull, cause, 37, 2*time.Second)
	assert.Equal(t, 1.0, testutil.ToFloat64(p.paused))
	assert.Equal(t, 1.0, testutil.ToFloat64(p.pauses))
	err = p.check(context.Background())
	require.Error(t, err)
	assert.Contains(t, err.Error(), "intake paused since 2025-07-01T12:00:00Z")
	assert.Contains(t, err.Error(), "no space left on device")
	assert.Contains(t, err.Error(), "37 messages held unacknowledged")
	assert.Contains(t, err.Error(), "free space on the state file's disk")

	require.Eventually(t, func() bool { pub.mu.Lock(); defer pub.mu.Unlock(); return len(pub.msgs) == 2 }, 5*time.Second, time.Millisecond)
	pub.mu.Lock()
	for i, site := range []string{"north", "south"} {
		m := pub.msgs[i]
		assert.Equal(t, quality.Topic("farm", alert.StateKey(site, alert.KindStateDiskFull)), m.topic)
		assert.Equal(t, "farm/"+site+"/alerts/gateway/state/file/state-disk-full", m.topic)
		assert.True(t, m.retained)
		assert.True(t, strings.Contains(m.payload, `"severity":"critical"`), m.payload)
	}
	pub.mu.Unlock()

	mon.mu.Lock()
	mon.writable = true
	mon.mu.Unlock()
	p.resume(t0.Add(time.Minute))
	require.NoError(t, p.check(context.Background()))
	assert.Equal(t, 0.0, testutil.ToFloat64(p.paused))
	require.Len(t, mon.raised, 2)
	assert.Equal(t, alert.SeverityCritical, mon.raised[0].Severity)
	assert.Equal(t, []alert.Key{alert.StateKey("north", alert.KindStateDiskFull), alert.StateKey("south", alert.KindStateDiskFull)}, mon.cleared)

	// Resuming again does nothing; a second pause counts again.
	p.resume(t0.Add(2 * time.Minute))
	assert.Len(t, mon.cleared, 2)
	p.hold(t0.Add(time.Hour), alert.KindStateWriteError, fmt.Errorf("ingest: %w", syscall.EIO), 1, time.Second)
	assert.Equal(t, 2.0, testutil.ToFloat64(p.pauses))
	err = p.check(context.Background())
	require.Error(t, err)
	assert.Contains(t, err.Error(), "check the state file's disk")
	assert.Equal(t, alert.StateKey("north", alert.KindStateWriteError), mon.raised[2].Key)
}
