package demo

import (
	"context"
	"sync"

	"etpulse/gateway"
	"etpulse/gateway/mqtt"
)

// traffic counts the demo's MQTT messages in flight: every message published
// by a part of the demo is expected at each demo client with a matching
// subscription and counts until that client's handler has returned. The
// demo moves its clock only when nothing is in flight, so every message is
// handled at the simulated minute it was sent.
type traffic struct {
	mu       sync.Mutex
	subs     map[string][]string // client -> its filters
	inFlight int                 // deliveries not yet handled, plus publishes not yet returned
	sent     uint64              // messages published so far
	idle     chan struct{}       // closed when inFlight drops to 0
}

func newTraffic() *traffic {
	idle := make(chan struct{})
	close(idle)
	return &traffic{subs: map[string][]string{}, idle: idle}
}

// expect counts one message published on topic: one delivery per client
// subscribed to it, plus the publish itself (publishing true) until done.
func (t *traffic) expect(topic string, publishing bool) int {
	t.mu.Lock()
	defer t.mu.Unlock()
	n := 0
	for _, filters := range t.subs {
		for _, f := range filters {
			if mqtt.MatchTopic(f, topic) {
				n++
				break
			}
		}
	}
	t.sent++
	if publishing {
		t.addLocked(n + 1)
	} else {
		t.addLocked(n)
	}
	return n
}

func (t *traffic) add(n int) {
	t.mu.Lock()
	defer t.mu.Unlock()
	t.addLocked(n)
}

func (t *traffic) addLocked(n int) {
	was := t.inFlight
	t.inFlight += n
	switch {
	case was == 0 && t.inFlight > 0:
		t.idle = make(chan struct{})
	case was > 0 && t.inFlight <= 0:
		t.inFlight = 0
		close(t.idle)
	}
}

// Idle returns a channel closed when no message is in flight.
func (t *traffic) Idle() <-chan struct{} {
	t.mu.Lock()
	defer t.mu.Unlock()
	return t.idle
}

// Sent returns how many messages have been published so far.
func (t *traffic) Sent() uint64 {
	t.mu.Lock()
	defer t.mu.Unlock()
	return t.sent
}

// client wraps a demo MQTT connection so its messages are counted.
func (t *traffic) client(name string, b gateway.Broker) *countedBroker {
	return &countedBroker{t: t, name: name, b: b}
}

// countedBroker is a demo client whose publishes and handled messages are
// counted by traffic.
type countedBroker struct {
	t    *traffic
	name string
	b    gateway.Broker
}

var _ gateway.Broker = (*countedBroker)(nil)

// Publish publishes and counts the message until every demo client
// subscribed to topic has handled it.
func (c *countedBroker) Publish(ctx context.Context, topic string, qos byte, retained bool, payload []byte) error {
	n := c.t.expect(topic, true)
	err := c.b.Publish(ctx, topic, qos, retained, payload)
	if err != nil {
		c.t.add(-n - 1) // not delivered (the demo is stopping)
		return err
	}
	c.t.add(-1)
	return nil
}

// Subscribe subscribes; each message counts as handled when handle returns.
func (c *countedBroker) Subscribe(filter string, qos byte, handle func(mqtt.Message)) error {
	c.t.mu.Lock()
	c.t.subs[c.name] = append(c.t.subs[c.name], filter)
	c.t.mu.Unlock()
	return c.b.Subscribe(filter, qos, func(m mqtt.Message) {
		defer c.t.add(-1)
		handle(m)
	})
}

// Connected reports the wrapped connection's state (health checks).
func (c *countedBroker) Connected() bool {
	if cc, ok := c.b.(interface{ Connected() bool }); ok {
		return cc.Connected()
	}
	return true
}
