package gateway

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"maps"
	"slices"
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
	fail     map[string]int // topic -> publishes still to refuse
}

func (b *countingBroker) Publish(_ context.Context, topic string, _ byte, _ bool, _ []byte) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.fail[topic] > 0 {
		b.fail[topic]--
		return errors.New("broker gone")
	}
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
	p := newStatePublisher("farm", b, clock.NewManual(now), slog.New(slog.DiscardHandler), nil)
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

// A pass builds the payloads of the stations whose hour changed since the
// last pass, not of every station (at 5,000 stations every record cost
// 5,000 payloads); a station whose publish failed is built and sent again.
func TestStatePassBuildsOnlyChangedStations(t *testing.T) {
	b := &countingBroker{connects: 1, fail: map[string]int{}}
	now := time.Date(2026, 7, 14, 6, 0, 0, 0, time.UTC)
	p := newStatePublisher("farm", b, clock.NewManual(now), slog.New(slog.DiscardHandler), nil)
	note := func(station string, start time.Time) {
		p.noteRecord(hourly.Record{Site: "lowfield", Station: station, Reference: hourly.Short, Start: start,
			End: start.Add(time.Hour), Complete: true, Result: &hourly.Result{Reference: hourly.Short, ET: 0.2}})
	}
	for i := range 50 {
		note(fmt.Sprintf("mast-%02d", i), now.Add(-time.Hour))
	}
	ctx := context.Background()
	_, err := p.RunOnce(ctx, now)
	require.NoError(t, err)
	assert.Len(t, b.take(), 50)

	note("mast-07", now)
	msgs, _, err := p.payloads(now)
	require.NoError(t, err)
	assert.Equal(t, []string{"farm/lowfield/mast-07/state"}, slices.Collect(maps.Keys(msgs)), "only the station whose hour changed is built")

	note("mast-08", now)
	b.mu.Lock()
	b.fail["farm/lowfield/mast-08/state"] = 1
	b.mu.Unlock()
	_, err = p.RunOnce(ctx, now.Add(time.Minute))
	require.NoError(t, err)
	assert.Empty(t, b.take(), "mast-07 was taken by the payloads call above; mast-08's publish failed")
	_, err = p.RunOnce(ctx, now.Add(2*time.Minute))
	require.NoError(t, err)
	assert.Equal(t, []string{"farm/lowfield/mast-08/state"}, b.take(), "sent again at the next pass")
}
