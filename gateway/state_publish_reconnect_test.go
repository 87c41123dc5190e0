package gateway

import (
	"context"
	"log/slog"
	"sync"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/clock"
	"etpulse/hourly"
)

// countingBroker records retained publishes and counts connects, as
// mqtt.Client does.
type countingBroker struct {
	mu       sync.Mutex
	topics   []string
	connects uint64
}

func (b *countingBroker) Publish(_ context.Context, topic string, _ byte, _ bool, _ []byte) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.topics = append(b.topics, topic)
	return nil
}

func (b *countingBroker) Connects() uint64 {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.connects
}

func (b *countingBroker) take() []string {
	b.mu.Lock()
	defer b.mu.Unlock()
	t := b.topics
	b.topics = nil
	return t
}

// TestStateRepublishedAfterReconnect: the state topics are published once
// while nothing changes, and again after the client reconnected (a broker
// restarted without persistence has lost its retained messages).
func TestStateRepublishedAfterReconnect(t *testing.T) {
	b := &countingBroker{connects: 1}
	now := time.Date(2026, 7, 14, 6, 0, 0, 0, time.UTC)
	p := &statePublisher{prefix: "farm", pub: b, clock: clock.NewManual(now), log: slog.New(slog.DiscardHandler),
		wake: make(chan struct{}, 1), hours: map[[2]string]map[hourly.Reference]hourly.Record{}, sent: map[string]string{}}
	et := 0.31
	p.noteRecord(hourly.Record{Site: "lowfield", Station: "mast", Reference: hourly.Short, Start: now.Add(-time.Hour),
		End: now, Complete: true, Result: &hourly.Result{Reference: hourly.Short, ET: et}})

	ctx := context.Background()
	_, err := p.RunOnce(ctx, now)
	require.NoError(t, err)
	assert.Equal(t, []string{"farm/lowfield/mast/state"}, b.take())
	_, err = p.RunOnce(ctx, now.Add(time.Minute))
	require.NoError(t, err)
	assert.Empty(t, b.take(), "unchanged state is not published again")

	b.mu.Lock()
	b.connects++
	b.mu.Unlock()
	_, err = p.RunOnce(ctx, now.Add(2*time.Minute))
	require.NoError(t, err)
	assert.Equal(t, []string{"farm/lowfield/mast/state"}, b.take(), "after a reconnect every state topic is published again")
}
