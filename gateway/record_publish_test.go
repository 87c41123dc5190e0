package gateway_test

import (
	"context"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/clock"
	"etpulse/gateway/demo"
	"etpulse/gateway/mqtt"
	"etpulse/hourly"
)

// slowAckBroker is the gateway's connection with a broker that takes its
// time to acknowledge hour records: the first one is sent at once (like
// paho, which keeps a QoS 1 message in its store and sends it whatever the
// caller does) but its acknowledgement comes only on release; a caller
// that gives up first gets its context's error.
type slowAckBroker struct {
	*mqtt.Client
	release chan struct{}

	mu    sync.Mutex
	sent  int // hour records handed to the broker
	first bool
}

func (b *slowAckBroker) Publish(ctx context.Context, topic string, qos byte, retained bool, payload []byte) error {
	if !strings.HasSuffix(topic, "/hour") {
		return b.Client.Publish(ctx, topic, qos, retained, payload)
	}
	b.mu.Lock()
	b.sent++
	slow := !b.first
	b.first = true
	b.mu.Unlock()
	if err := b.Client.Publish(context.Background(), topic, qos, retained, payload); err != nil {
		return err
	}
	if !slow {
		return nil
	}
	select {
	case <-b.release:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

func (b *slowAckBroker) records() int {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.sent
}

// An hour record whose acknowledgement is slow is published once: the
// publisher does not send it again while the first publish is still under
// way (before, a publish that outlasted its wait was retried, and the record
// went out twice). Embedded broker, no servers needed.
func TestSlowAckRecordPublishedOnce(t *testing.T) {
	srv, url, err := demo.StartBroker(true)
	require.NoError(t, err)
	t.Cleanup(func() { _ = srv.Close() })
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	sim, cfg, db, client := silentStation(ctx, t, url, "slowack")
	broker := &slowAckBroker{Client: client, release: make(chan struct{})}

	clk := clock.NewManual(sim.Start())
	var mu sync.Mutex
	var recs []hourly.Record
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: broker, Clock: clk,
		OnRecord: func(r hourly.Record) { mu.Lock(); recs = append(recs, r); mu.Unlock() }})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- g.RunStepped(ctx) }()
	<-g.Ready()
	msgs := sim.Generate(sim.Start(), sim.Start().Add(40*time.Minute))
	for _, m := range msgs {
		require.NoError(t, srv.Publish(m.Topic, m.Payload, false, 1))
	}
	require.Eventually(t, func() bool { return g.Handled() >= uint64(len(msgs)) }, 20*time.Second, 5*time.Millisecond)

	// The hour closes by silence (20m in the demo configuration); its
	// publish outlasts the step.
	clk.Set(sim.Start().Add(time.Hour + 20*time.Minute))
	short, cancelShort := context.WithTimeout(ctx, 200*time.Millisecond)
	_ = g.Step(short, clk.Now())
	cancelShort()
	assert.Equal(t, 1, broker.records())
	close(broker.release) // the acknowledgement arrives late

	clk.Set(sim.Start().Add(time.Hour + 21*time.Minute))
	require.NoError(t, g.Step(ctx, clk.Now()))
	require.Eventually(t, func() bool { return g.Published() == 1 }, 10*time.Second, 5*time.Millisecond)
	require.NoError(t, g.Step(ctx, clk.Now()))
	assert.Equal(t, 1, broker.records(), "hour records handed to the broker")
	assert.Equal(t, uint64(1), g.Published())
	mu.Lock()
	assert.Len(t, recs, 1)
	mu.Unlock()
	cancel()
	require.NoError(t, <-done)
}
