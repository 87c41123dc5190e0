package gateway_test

import (
	"context"
	"fmt"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/alert"
	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/quality"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// recordingBroker passes everything to the real client and remembers the
// topics published and the filters subscribed.
type recordingBroker struct {
	gateway.Broker
	mu         sync.Mutex
	published  map[string]bool
	subscribed map[string]bool
}

var _ gateway.Broker = (*recordingBroker)(nil)

func (b *recordingBroker) Publish(ctx context.Context, topic string, qos byte, retained bool, payload []byte) error {
	b.mu.Lock()
	b.published[topic] = true
	b.mu.Unlock()
	return b.Broker.Publish(ctx, topic, qos, retained, payload)
}

func (b *recordingBroker) Subscribe(filter string, qos byte, handle func(mqtt.Message)) error {
	b.mu.Lock()
	b.subscribed[filter] = true
	b.mu.Unlock()
	return b.Broker.Subscribe(filter, qos, handle)
}

func (b *recordingBroker) topics() (pub, sub []string) {
	b.mu.Lock()
	defer b.mu.Unlock()
	for t := range b.published {
		pub = append(pub, t)
	}
	for t := range b.subscribed {
		sub = append(sub, t)
	}
	return pub, sub
}

// TestTopicPrefixFromConfig runs the gateway with topic_prefix set in the
// configuration (several levels, nothing in Deps) against mosquitto and
// checks that the hourly records, the hold reply and an alert appear under
// it, and that every topic the gateway publishes or subscribes that is not
// a sensor topic lies under it.
func TestTopicPrefixFromConfig(t *testing.T) {
	url := testenv.MQTT(t)
	root := fmt.Sprintf("itprefix%d", time.Now().UnixNano())
	prefix := root + "/gw/north"
	sim := demo.New(demo.Options{Seed: 9, TopicRoot: root + "/sensors", Stations: []string{demo.Orchard, demo.Paddock},
		DupRate: -1, LateRate: -1, BadRate: -1, ShuffleRate: -1})
	dir := t.TempDir()
	doc := "topic_prefix: " + prefix + "\n" + sim.ConfigYAML(demo.ConfigOptions{StatePath: filepath.Join(dir, "s.db"), BrokerURL: url})
	doc = strings.Replace(doc, "  client_id: \"\"\n", "", 1)
	cfg, err := config.Parse([]byte(doc))
	require.NoError(t, err)
	assert.Equal(t, prefix, cfg.Alerts.TopicPrefix)
	assert.Equal(t, root+"-gw-north-"+demo.Site, cfg.Broker.ClientID)

	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	client, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: cfg.Broker.ClientID, Workers: 1, CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { client.Close(time.Second) })
	rb := &recordingBroker{Broker: client, published: map[string]bool{}, subscribed: map[string]bool{}}

	// A watcher of everything under the test's root.
	watch, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: root + "-watch", CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { watch.Close(time.Second) })
	seen := make(chan string, 1000)
	require.NoError(t, watch.Subscribe(prefix+"/#", 1, func(m mqtt.Message) {
		seen <- m.Topic
		m.Ack()
	}))
	waitTopic := func(topic string) {
		t.Helper()
		deadline := time.After(20 * time.Second)
		for {
			select {
			case got := <-seen:
				if got == topic {
					return
				}
			case <-deadline:
				t.Fatalf("nothing on %s", topic)
			}
		}
	}

	clock := demo.NewClock(sim.Start())
	recs := make(chan hourly.Record, 10)
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: rb, Clock: clock,
		OnRecord: func(r hourly.Record) { recs <- r }})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- g.Run(ctx) }()
	select {
	case <-g.Ready():
	case err := <-done:
		t.Fatalf("gateway stopped: %v", err)
	}

	msgs := sim.Generate(sim.Start(), sim.Start().Add(70*time.Minute))
	clock.Set(sim.Start().Add(70 * time.Minute)) // no reading is too far in the future
	publishAll(t, url, root+"-pub", msgs)
	require.Eventually(t, func() bool { return g.Handled() == uint64(len(msgs)) }, 20*time.Second, 5*time.Millisecond)
	select {
	case r := <-recs:
		assert.Equal(t, sim.Start(), r.Start)
	case <-time.After(10 * time.Second):
		t.Fatal("no hourly record")
	}
	waitTopic(prefix + "/" + demo.Site + "/" + demo.Orchard + "/hour")

	pub, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: root + "-hold", CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { pub.Close(time.Second) })
	require.NoError(t, pub.Publish(ctx, prefix+"/"+demo.Site+"/hold", 1, false,
		[]byte(`{"id": "h-1", "zone": "wheat-east", "action": "hold", "hours": 2, "reason": "pump service"}`)))
	waitTopic(prefix + "/" + demo.Site + "/hold/reply")

	require.NoError(t, g.Alerts().Raise(nil, alert.Alert{
		Key:      alert.Key{Site: demo.Site, Station: demo.Paddock, Sensor: alert.HourSubject, Quantity: hourly.Wind, Kind: alert.KindCalm},
		Severity: alert.SeverityWarning, Message: "test alert", Since: clock.Now(),
	}))
	waitTopic(quality.Topic(prefix, alert.Key{Site: demo.Site, Station: demo.Paddock, Sensor: alert.HourSubject, Quantity: hourly.Wind, Kind: alert.KindCalm}))

	cancel()
	require.NoError(t, <-done)

	sensors := map[string]bool{}
	for _, st := range cfg.Sites[0].Stations {
		for _, sn := range st.Sensors {
			sensors[sn.Topic] = true
		}
	}
	published, subscribed := rb.topics()
	assert.NotEmpty(t, published)
	for _, tp := range published {
		assert.True(t, strings.HasPrefix(tp, prefix+"/"), "published %s outside %s", tp, prefix)
	}
	for _, f := range subscribed {
		assert.True(t, sensors[f] || strings.HasPrefix(f, prefix+"/"), "subscribed %s: neither a sensor topic nor under %s", f, prefix)
	}
}
