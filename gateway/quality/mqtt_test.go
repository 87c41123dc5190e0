package quality

import (
	"context"
	"encoding/json"
	"fmt"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/config"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/hourly"
)

// collector records the messages of one subscription.
type collector struct {
	mu   sync.Mutex
	msgs map[string][]string // topic -> payloads in arrival order
	got  chan string         // topics, as they arrive
}

func subscribe(t *testing.T, url, filter string) *collector {
	t.Helper()
	c := &collector{msgs: map[string][]string{}, got: make(chan string, 100)}
	cl, err := mqtt.Dial(context.Background(), mqtt.Options{URL: url, ClientID: fmt.Sprintf("alerts-test-sub-%d", time.Now().UnixNano()), CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { cl.Close(100 * time.Millisecond) })
	require.NoError(t, cl.Subscribe(filter, 1, func(m mqtt.Message) {
		c.mu.Lock()
		c.msgs[m.Topic] = append(c.msgs[m.Topic], string(m.Payload))
		c.mu.Unlock()
		if m.Ack != nil {
			m.Ack()
		}
		c.got <- m.Topic
	}))
	return c
}

// wait waits for a message on topic and returns its payload.
func (c *collector) wait(t *testing.T, topic string, n int) string {
	t.Helper()
	deadline := time.After(20 * time.Second)
	for {
		c.mu.Lock()
		if len(c.msgs[topic]) >= n {
			p := c.msgs[topic][n-1]
			c.mu.Unlock()
			return p
		}
		c.mu.Unlock()
		select {
		case <-c.got:
		case <-deadline:
			t.Fatalf("no message %d on %s", n, topic)
		}
	}
}

func (c *collector) count(topic string) int {
	c.mu.Lock()
	defer c.mu.Unlock()
	return len(c.msgs[topic])
}

// TestAlertsOnMosquitto raises an alert, publishes it retained on the real
// mosquitto, checks that a subscriber connecting later sees the current
// state, clears it with an empty retained message, and checks that a still
// later subscriber sees nothing on the topic.
func TestAlertsOnMosquitto(t *testing.T) {
	url := testenv.MQTT(t)
	prefix := fmt.Sprintf("etpulse-test-%d", time.Now().UnixNano())
	cfg := testConfig(config.RespondExclude)
	cfg.Alerts.TopicPrefix = prefix
	topic := prefix + "/brackenfold/alerts/orchard/hourly/solar/solar-low"
	marker := prefix + "/marker"

	pub, err := mqtt.Dial(context.Background(), mqtt.Options{URL: url, ClientID: fmt.Sprintf("alerts-test-pub-%d", time.Now().UnixNano()), CleanSession: true})
	require.NoError(t, err)
	defer pub.Close(100 * time.Millisecond)

	f := newFixture(t, cfg, filepath.Join(t.TempDir(), "m.db"), synthStart)
	f.mon.pub = pub
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- f.mon.Run(ctx) }()
	defer func() {
		cancel()
		require.NoError(t, <-done)
	}()

	live := subscribe(t, url, prefix+"/#")
	f.closeHours(t, weather{solarScale: 0.75}.hours(8*24))
	var a map[string]any
	require.NoError(t, json.Unmarshal([]byte(live.wait(t, topic, 1)), &a))
	assert.Equal(t, "solar-low", a["kind"])
	assert.Equal(t, "active", a["state"])
	assert.Contains(t, a["message"], "max daily Rs/Rso over the last")

	// A dashboard that connects late sees the current state (retained).
	late := subscribe(t, url, prefix+"/#")
	require.NoError(t, json.Unmarshal([]byte(late.wait(t, topic, 1)), &a))
	assert.Equal(t, "active", a["state"])

	// The dome is cleaned; the alert clears with an empty retained message.
	clean := weather{}.hours(11 * 24)[8*24:]
	for _, o := range clean {
		rec := record(o)
		require.NoError(t, f.db.Update(func(tx *bbolt.Tx) error { return f.mon.HandleHour(tx, rec) }))
	}
	assert.Equal(t, "", live.wait(t, topic, 2), "cleared: empty payload")
	require.Eventually(t, func() bool { return len(f.pendingPublish(t)) == 0 }, 20*time.Second, 20*time.Millisecond, "published messages leave the state file")

	// A still later subscriber gets no retained alert on the topic: the
	// retained marker, published after the clear, arrives alone.
	require.NoError(t, pub.Publish(context.Background(), marker, 1, true, []byte("x")))
	later := subscribe(t, url, prefix+"/#")
	later.wait(t, marker, 1)
	time.Sleep(200 * time.Millisecond) // retained messages arrive together on subscribe
	assert.Zero(t, later.count(topic))
	require.NoError(t, pub.Publish(context.Background(), marker, 1, true, nil))
	for _, al := range f.mon.Active() {
		assert.NotEqual(t, hourly.Solar, al.Quantity)
	}
}
