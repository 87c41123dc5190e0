package quality

import (
	"context"
	"errors"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/alert"
	"etpulse/hourly"
)

// flakyPublisher fails while down is set.
type flakyPublisher struct {
	down bool
	sent []string
}

func (p *flakyPublisher) Publish(_ context.Context, topic string, _ byte, _ bool, _ []byte) error {
	if p.down {
		return errors.New("broker away")
	}
	p.sent = append(p.sent, topic)
	return nil
}

// RunOnce asks for its next pass at the silence deadline, or sooner at the
// publish retry while the broker is away, backing off 1 s, 2 s, ... (the
// retry times are our own choice, common practice, no source).
func TestMonitorRunOnceNextPass(t *testing.T) {
	now := time.Date(2026, 7, 14, 12, 0, 0, 0, time.UTC)
	f := newFixture(t, testConfig(""), filepath.Join(t.TempDir(), "s.db"), now)
	pub := &flakyPublisher{down: true}
	f.mon.pub = pub
	f.mon.mu.Lock()
	silence := f.mon.next
	f.mon.mu.Unlock()
	require.False(t, silence.IsZero(), "every configured sensor has a silence deadline from the start")
	require.True(t, silence.After(now.Add(3*time.Second)))

	require.NoError(t, f.mon.Raise(nil, alert.Alert{Key: alert.Key{Site: "brackenfold", Station: "orchard", Sensor: alert.HourSubject, Quantity: hourly.Wind, Kind: alert.KindCalm},
		Message: "test alert", Since: now}))
	ctx := context.Background()
	next, err := f.mon.RunOnce(ctx, now)
	require.NoError(t, err)
	assert.Equal(t, now.Add(time.Second), next, "first retry after 1 s")
	next, err = f.mon.RunOnce(ctx, next)
	require.NoError(t, err)
	assert.Equal(t, now.Add(3*time.Second), next, "then after 2 s more")

	pub.down = false
	next, err = f.mon.RunOnce(ctx, next)
	require.NoError(t, err)
	assert.Len(t, pub.sent, 1, "the pending alert went out")
	assert.Equal(t, silence, next, "nothing to retry: the silence deadline")
}
