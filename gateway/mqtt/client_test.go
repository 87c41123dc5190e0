package mqtt

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/internal/testenv"
)

// uniq returns a topic prefix and client id no other test run shares on the
// common test broker.
func uniq(t *testing.T) string {
	return fmt.Sprintf("etpulse-test/%s/%08x", t.Name(), rand.Uint32())
}

func dial(t *testing.T, url, id string, mod ...func(*Options)) *Client {
	t.Helper()
	o := Options{URL: url, ClientID: id, ConnectTimeout: 5 * time.Second}
	for _, m := range mod {
		m(&o)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	c, err := Dial(ctx, o)
	require.NoError(t, err)
	t.Cleanup(func() { c.Close(0) })
	return c
}

// collector gathers received payloads.
type collector struct {
	mu   sync.Mutex
	msgs []Message
	ch   chan struct{}
}

func newCollector() *collector { return &collector{ch: make(chan struct{}, 100000)} }

func (c *collector) handle(ack bool) func(Message) {
	return func(m Message) {
		c.mu.Lock()
		c.msgs = append(c.msgs, m)
		c.mu.Unlock()
		if ack {
			m.Ack()
		}
		c.ch <- struct{}{}
	}
}

// wait waits for n more messages, failing after limit.
func (c *collector) wait(t *testing.T, n int, limit time.Duration) {
	t.Helper()
	deadline := time.After(limit)
	for i := 0; i < n; i++ {
		select {
		case <-c.ch:
		case <-deadline:
			t.Fatalf("received %d of %d messages within %s", i, n, limit)
		}
	}
}

func (c *collector) payloads() []string {
	c.mu.Lock()
	defer c.mu.Unlock()
	var out []string
	for _, m := range c.msgs {
		out = append(out, string(m.Payload))
	}
	sort.Strings(out)
	return out
}

func TestPublishSubscribeQoS1(t *testing.T) {
	url := testenv.MQTT(t)
	base := uniq(t)
	reg := prometheus.NewRegistry()
	var ups atomic.Int32
	sub := dial(t, url, "sub-"+base[len(base)-8:], func(o *Options) {
		o.Registerer = reg
		o.CleanSession = true
		o.OnConnectionChange = func(up bool) {
			if up {
				ups.Add(1)
			}
		}
	})
	pub := dial(t, url, "pub-"+base[len(base)-8:], func(o *Options) { o.CleanSession = true })
	col := newCollector()
	require.NoError(t, sub.Subscribe(base+"/+/t", 1, col.handle(true)))

	const n = 200
	ctx := context.Background()
	for i := 0; i < n; i++ {
		require.NoError(t, pub.Publish(ctx, fmt.Sprintf("%s/s%d/t", base, i%3), 1, false, []byte(fmt.Sprintf("%03d", i))))
	}
	require.NoError(t, pub.Publish(ctx, base+"/s1/other", 1, false, []byte("not subscribed")))
	col.wait(t, n, 20*time.Second)
	got := col.payloads()
	require.Len(t, got, n)
	for i := 0; i < n; i++ {
		assert.Equal(t, fmt.Sprintf("%03d", i), got[i])
	}
	col.mu.Lock()
	assert.Equal(t, byte(1), col.msgs[0].QoS)
	col.mu.Unlock()

	assert.True(t, sub.Connected())
	assert.Equal(t, 1.0, testutil.ToFloat64(sub.m.connected))
	assert.Equal(t, float64(n), testutil.ToFloat64(sub.m.received))
	assert.Equal(t, 0.0, testutil.ToFloat64(sub.m.reconnects))
	assert.Equal(t, int32(1), ups.Load())
	n2, err := testutil.GatherAndCount(reg, "etpulse_mqtt_connected", "etpulse_mqtt_reconnects_total", "etpulse_mqtt_messages_received_total")
	require.NoError(t, err)
	assert.Equal(t, 3, n2)
}

// TestPersistentSessionRedelivers: messages received but not acknowledged
// come back (marked duplicate) to the next connection with the same client
// id, together with those published while the client was away; acknowledged
// ones do not.
func TestPersistentSessionRedelivers(t *testing.T) {
	bk := testenv.NewMosquittoWith(t, "log_type all\n")
	url := bk.URL
	defer func() {
		if t.Failed() {
			t.Log(bk.Log())
		}
	}()
	topic := "kestrel/north/t"
	id := "etpulse-persist-test"
	pub := dial(t, url, "pub", func(o *Options) { o.CleanSession = true })
	ctx := context.Background()

	first := dial(t, url, id)
	col1 := newCollector()
	require.NoError(t, first.Subscribe(topic, 1, col1.handle(false))) // never acks
	for i := 0; i < 5; i++ {
		require.NoError(t, pub.Publish(ctx, topic, 1, false, []byte(fmt.Sprintf("a%d", i))))
	}
	col1.wait(t, 5, 10*time.Second)
	first.Close(time.Second)
	for i := 0; i < 3; i++ {
		require.NoError(t, pub.Publish(ctx, topic, 1, false, []byte(fmt.Sprintf("b%d", i))))
	}

	second := dial(t, url, id)
	col2 := newCollector()
	require.NoError(t, second.Subscribe(topic, 1, col2.handle(true)))
	col2.wait(t, 8, 10*time.Second)
	assert.Equal(t, []string{"a0", "a1", "a2", "a3", "a4", "b0", "b1", "b2"}, col2.payloads())
	col2.mu.Lock()
	for _, m := range col2.msgs {
		if m.Payload[0] == 'a' {
			assert.True(t, m.Duplicate, "the unacknowledged %s comes back marked duplicate", m.Payload)
		}
	}
	col2.mu.Unlock()
	second.Close(time.Second)
	// The broker reads each connection on its own: give it a moment to read
	// the acknowledgements and DISCONNECT of this connection before the next
	// one with the same client id takes the session over (it would close
	// this one with its unread acknowledgements).
	time.Sleep(300 * time.Millisecond)

	// Everything was acknowledged: a third session gets only new messages.
	third := dial(t, url, id)
	col3 := newCollector()
	require.NoError(t, third.Subscribe(topic, 1, col3.handle(true)))
	require.NoError(t, pub.Publish(ctx, topic, 1, false, []byte("c0")))
	col3.wait(t, 1, 10*time.Second)
	assert.Equal(t, []string{"c0"}, col3.payloads())
}

// TestResubscribeAfterBrokerRestart: a broker without persistence forgets
// the subscription; the client reconnects by itself and subscribes again.
func TestResubscribeAfterBrokerRestart(t *testing.T) {
	b := testenv.NewMosquitto(t, false)
	var downs, ups atomic.Int32
	c := dial(t, b.URL, "etpulse-restart-test", func(o *Options) {
		o.Registerer = prometheus.NewRegistry()
		o.KeepAlive = 2 * time.Second
		o.OnConnectionChange = func(up bool) {
			if up {
				ups.Add(1)
			} else {
				downs.Add(1)
			}
		}
	})
	col := newCollector()
	require.NoError(t, c.Subscribe("lowmead/+/rain", 1, col.handle(true)))

	b.Stop()
	require.Eventually(t, func() bool { return !c.Connected() }, 10*time.Second, 20*time.Millisecond)
	// paho reports the link down before it calls the connection-lost
	// handler that sets the gauge: wait for the handler, not just the link.
	require.Eventually(t, func() bool { return downs.Load() == 1 }, 10*time.Second, 20*time.Millisecond)
	assert.Equal(t, 0.0, testutil.ToFloat64(c.m.connected))
	b.Start()
	require.Eventually(t, func() bool { return c.Connected() && ups.Load() == 2 }, 60*time.Second, 50*time.Millisecond)

	pub := dial(t, b.URL, "pub", func(o *Options) { o.CleanSession = true })
	// The resubscription runs right after the reconnect; publish until it lands.
	deadline := time.Now().Add(10 * time.Second)
	for {
		require.NoError(t, pub.Publish(context.Background(), "lowmead/gauge1/rain", 1, false, []byte("0.2")))
		select {
		case <-col.ch:
			assert.Equal(t, 1.0, testutil.ToFloat64(c.m.reconnects))
			assert.Equal(t, int32(1), downs.Load())
			return
		case <-time.After(200 * time.Millisecond):
		}
		require.True(t, time.Now().Before(deadline), "no message after the broker restart: not resubscribed")
	}
}

// TestQueuedAcrossPersistentBrokerRestart: with broker persistence the
// session and its queued messages survive a broker restart.
func TestQueuedAcrossPersistentBrokerRestart(t *testing.T) {
	b := testenv.NewMosquitto(t, true)
	id := "etpulse-durable-test"
	c := dial(t, b.URL, id)
	require.NoError(t, c.Subscribe("kestrel/+/solar", 1, func(m Message) { m.Ack() }))
	c.Close(time.Second)

	pub := dial(t, b.URL, "pub", func(o *Options) { o.CleanSession = true })
	for i := 0; i < 3; i++ {
		require.NoError(t, pub.Publish(context.Background(), "kestrel/mast/solar", 1, false, []byte(fmt.Sprint(400+i))))
	}
	pub.Close(time.Second)
	b.Stop()
	b.Start()

	// The queued messages may arrive before Subscribe is called in the new
	// process: the client holds them for the subscription that claims them.
	c2 := dial(t, b.URL, id)
	time.Sleep(200 * time.Millisecond) // let the broker deliver the queue first
	col := newCollector()
	require.NoError(t, c2.Subscribe("kestrel/+/solar", 1, col.handle(true)))
	col.wait(t, 3, 10*time.Second)
	assert.Equal(t, []string{"400", "401", "402"}, col.payloads())
}

// TestBackPressure: a slow handler bounds the messages held by the client to
// the queue plus the workers (plus the one the router is handing over).
func TestBackPressure(t *testing.T) {
	url := testenv.MQTT(t)
	base := uniq(t)
	const maxInflight, workers, n = 4, 1, 60
	sub := dial(t, url, "bp-"+base[len(base)-8:], func(o *Options) {
		o.CleanSession = true
		o.MaxInflight = maxInflight
		o.Workers = workers
	})
	release := make(chan struct{})
	var handled, peak atomic.Int64
	require.NoError(t, sub.Subscribe(base, 1, func(m Message) {
		if v := int64(sub.Inflight()); v > peak.Load() {
			peak.Store(v)
		}
		<-release
		m.Ack()
		handled.Add(1)
	}))
	pub := dial(t, url, "bpp-"+base[len(base)-8:], func(o *Options) { o.CleanSession = true })
	for i := 0; i < n; i++ {
		require.NoError(t, pub.Publish(context.Background(), base, 1, false, []byte{byte(i)}))
	}
	// Wait until the client is saturated, then check the bound.
	require.Eventually(t, func() bool { return sub.Inflight() >= maxInflight }, 10*time.Second, 10*time.Millisecond)
	time.Sleep(100 * time.Millisecond)
	assert.LessOrEqual(t, sub.Inflight(), maxInflight+workers+1)
	assert.Equal(t, int64(0), handled.Load())
	close(release)
	require.Eventually(t, func() bool { return handled.Load() == n }, 20*time.Second, 10*time.Millisecond)
	assert.LessOrEqual(t, peak.Load(), int64(maxInflight+workers+1))
	assert.True(t, sub.Connected(), "a slow handler does not cost the connection")
}

func TestDialRefusedFailsFast(t *testing.T) {
	bin := testenv.Mosquitto(t)
	pwTool := filepath.Join(filepath.Dir(bin), "..", "bin", "mosquitto_passwd")
	if _, err := os.Stat(pwTool); err != nil {
		p, err := exec.LookPath("mosquitto_passwd")
		if err != nil {
			t.Skip("mosquitto_passwd not installed")
		}
		pwTool = p
	}
	dir := t.TempDir()
	pwFile := filepath.Join(dir, "passwd")
	out, err := exec.Command(pwTool, "-c", "-b", pwFile, "gateway", "right-horse").CombinedOutput()
	require.NoError(t, err, string(out))
	require.NoError(t, os.Chmod(pwFile, 0o644))
	b := testenv.NewMosquittoWith(t, fmt.Sprintf("allow_anonymous false\npassword_file %s\n", pwFile))

	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	_, err = Dial(ctx, Options{URL: b.URL, ClientID: "etpulse-auth-test", Username: "gateway", Password: "wrong"})
	require.Error(t, err)
	assert.Regexp(t, "not Authorized|bad user name or password", err.Error())
	assert.NoError(t, ctx.Err(), "a refusal is not retried until the context ends")

	c := dial(t, b.URL, "etpulse-auth-test", func(o *Options) { o.Username, o.Password = "gateway", "right-horse" })
	assert.True(t, c.Connected())
}

func TestDialUnreachableRetriesUntilContextEnds(t *testing.T) {
	url, stop := testenv.StartMosquitto(t, false)
	stop() // nothing listens there now
	ctx, cancel := context.WithTimeout(context.Background(), 1500*time.Millisecond)
	defer cancel()
	_, err := Dial(ctx, Options{URL: url, ClientID: "etpulse-unreachable", ConnectTimeout: 200 * time.Millisecond})
	require.Error(t, err)
	assert.ErrorIs(t, err, context.DeadlineExceeded)
}

func TestOptionsValidation(t *testing.T) {
	_, err := Dial(context.Background(), Options{ClientID: "x"})
	assert.EqualError(t, err, "mqtt dial: empty broker url")
	_, err = Dial(context.Background(), Options{URL: "tcp://127.0.0.1:1"})
	assert.ErrorContains(t, err, "empty client id")
}

// TestDiscardSessionDropsStaleQueue: a client id whose persistent session
// on the broker holds a queued message from an earlier run; Dial with
// DiscardSession (a fresh state file) does not receive it, and the session
// it then keeps is persistent: a message published while it is away
// arrives after the next (ordinary) Dial.
func TestDiscardSessionDropsStaleQueue(t *testing.T) {
	url := testenv.MQTT(t)
	id := uniq(t)
	topic := id + "/reading"
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()

	old := dial(t, url, id)
	require.NoError(t, old.Subscribe(topic, 1, func(m Message) { m.Ack() }))
	old.Close(0)
	pub := dial(t, url, id+"-pub", func(o *Options) { o.CleanSession = true })
	require.NoError(t, pub.Publish(ctx, topic, 1, false, []byte("stale")))

	fresh := dial(t, url, id, func(o *Options) { o.DiscardSession = true })
	got := newCollector()
	require.NoError(t, fresh.Subscribe(topic, 1, got.handle(true)))
	require.NoError(t, pub.Publish(ctx, topic, 1, false, []byte("marker")))
	got.wait(t, 1, 10*time.Second)
	// The broker delivers a session's queue before newer messages: had the
	// stale message survived, it would have come first.
	assert.Equal(t, []string{"marker"}, got.payloads())
	// A quiesce lets the acknowledgement of "marker" reach the broker
	// before the disconnect; closed at once it was now and then lost, and
	// the broker redelivered "marker" to the next connection.
	fresh.Close(time.Second)

	require.NoError(t, pub.Publish(ctx, topic, 1, false, []byte("while-away")))
	again := dial(t, url, id)
	back := newCollector()
	require.NoError(t, again.Subscribe(topic, 1, back.handle(true)))
	back.wait(t, 1, 10*time.Second)
	assert.Equal(t, []string{"while-away"}, back.payloads())
}
