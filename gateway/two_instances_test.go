package gateway_test

import (
	"context"
	"encoding/json"
	"fmt"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// instance is one gateway of a network, on its own state file and client id.
type instance struct {
	cfg     *config.Config
	g       *gateway.Gateway
	rb      *recordingBroker
	records chan hourly.Record
	msgs    []demo.Message
}

// startInstance runs a gateway for one site of the demo farm: the demo's
// configuration for the given stations, with the site renamed and its own
// client id, on the shared broker and topic prefix.
func startInstance(ctx context.Context, t *testing.T, url, prefix, sensors, site, clientID string, stations []string) *instance {
	t.Helper()
	sim := demo.New(demo.Options{Seed: 5, TopicRoot: sensors, Stations: stations,
		DupRate: -1, LateRate: -1, BadRate: -1, ShuffleRate: -1})
	doc := "topic_prefix: " + prefix + "\n" + sim.ConfigYAML(demo.ConfigOptions{
		StatePath: filepath.Join(t.TempDir(), "state.db"), BrokerURL: url, ClientID: clientID})
	renamed := strings.Replace(doc, "sites:\n  - id: "+demo.Site+"\n", "sites:\n  - id: "+site+"\n", 1)
	require.NotEqual(t, doc, renamed, "the demo's site line moved")
	cfg, err := config.Parse([]byte(renamed))
	require.NoError(t, err)

	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	mo, err := mqtt.OptionsFromConfig(cfg.Broker)
	require.NoError(t, err)
	// As the daemon: one worker, the availability topic of this client id.
	mo.Workers, mo.CleanSession = 1, true
	mo.Availability = config.AvailabilityTopic(cfg.Prefix(), cfg.Broker.ClientID)
	client, err := mqtt.Dial(ctx, mo)
	require.NoError(t, err)
	t.Cleanup(func() { client.Close(time.Second) })

	in := &instance{cfg: cfg, records: make(chan hourly.Record, 100),
		rb:   &recordingBroker{Broker: client, published: map[string]bool{}, subscribed: map[string]bool{}},
		msgs: sim.Generate(sim.Start(), sim.Start().Add(3*time.Hour+10*time.Minute))}
	clock := demo.NewClock(sim.Start().Add(3*time.Hour + 10*time.Minute)) // no reading is too far in the future
	in.g, err = gateway.New(cfg, gateway.Deps{DB: db, MQTT: in.rb, Clock: clock,
		OnRecord: func(r hourly.Record) { in.records <- r }})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- in.g.Run(ctx) }()
	t.Cleanup(func() { <-done })
	select {
	case <-in.g.Ready():
	case err := <-done:
		t.Fatalf("gateway %s stopped: %v", clientID, err)
	}
	return in
}

// TestTwoInstancesDisjointSites runs two gateways on one mosquitto, each
// given one site of the farm by its configuration (the scale-out of
// deploy/PERFORMANCE.md): each station's hourly records come from exactly
// one instance, once per hour, and each instance announces its own
// availability under its own client id. Nothing is coordinated between
// them but the configuration.
func TestTwoInstancesDisjointSites(t *testing.T) {
	url := testenv.MQTT(t)
	tag := fmt.Sprintf("two%d", time.Now().UnixNano())
	prefix, sensors := tag+"/net", tag+"/sensors"
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()

	// Everything the network publishes under the prefix, as a watcher sees it.
	watch, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: tag + "-watch", CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { watch.Close(time.Second) })
	var mu sync.Mutex
	seen := map[string][]string{}
	require.NoError(t, watch.Subscribe(prefix+"/#", 1, func(m mqtt.Message) {
		mu.Lock()
		seen[m.Topic] = append(seen[m.Topic], string(m.Payload))
		mu.Unlock()
		m.Ack()
	}))

	north := startInstance(ctx, t, url, prefix, sensors, "north-bench", tag+"-gw-north", []string{demo.Orchard})
	south := startInstance(ctx, t, url, prefix, sensors, "river-flat", tag+"-gw-south", []string{demo.Paddock})

	// One stream of the whole farm's readings on the shared broker.
	publishAll(t, url, tag+"-pub", append(append([]demo.Message{}, north.msgs...), south.msgs...))
	for _, in := range []*instance{north, south} {
		require.Eventually(t, func() bool { return in.g.Handled() == uint64(len(in.msgs)) }, 30*time.Second, 5*time.Millisecond,
			"%s takes exactly its own stations' messages", in.cfg.Broker.ClientID)
	}

	// Readings to 3 h 10 min close three hours at each station (close grace 5 min).
	const hours = 3
	for _, c := range []struct {
		in            *instance
		site, station string
	}{{north, "north-bench", demo.Orchard}, {south, "river-flat", demo.Paddock}} {
		got := map[time.Time]int{}
		for range hours {
			select {
			case r := <-c.in.records:
				assert.Equal(t, c.site, r.Site)
				assert.Equal(t, c.station, r.Station)
				got[r.Start]++
			case <-time.After(20 * time.Second):
				t.Fatalf("%s: %d of %d records", c.in.cfg.Broker.ClientID, len(got), hours)
			}
		}
		assert.Len(t, got, hours, "%s: one record per hour", c.station)
		pub, _ := c.in.rb.topics()
		for _, topic := range pub {
			if strings.HasSuffix(topic, "/hour") {
				assert.Equal(t, config.RecordTopic(prefix, c.site, c.station), topic, "%s publishes records of its own site only", c.in.cfg.Broker.ClientID)
			}
		}
	}

	// On the broker: each station's records from one instance, once an hour;
	// each instance online on its own availability topic.
	own := map[string]string{
		config.RecordTopic(prefix, "north-bench", demo.Orchard): tag + "-gw-north",
		config.RecordTopic(prefix, "river-flat", demo.Paddock):  tag + "-gw-south",
	}
	require.Eventually(t, func() bool {
		mu.Lock()
		defer mu.Unlock()
		for topic := range own {
			if len(seen[topic]) < hours {
				return false
			}
		}
		return true
	}, 20*time.Second, 10*time.Millisecond)
	time.Sleep(200 * time.Millisecond) // a duplicate from the other instance would arrive by now
	mu.Lock()
	defer mu.Unlock()
	for topic, payloads := range seen {
		if !strings.HasSuffix(topic, "/hour") {
			continue
		}
		require.Contains(t, own, topic, "a record topic of no configured site and station")
		starts := map[string]bool{}
		for _, p := range payloads {
			var rec struct {
				Site    string `json:"site"`
				Station string `json:"station"`
				Start   string `json:"start"`
			}
			require.NoError(t, json.Unmarshal([]byte(p), &rec), p)
			assert.Equal(t, topic, config.RecordTopic(prefix, rec.Site, rec.Station), "the record names its topic's site and station")
			assert.False(t, starts[rec.Start], "hour %s of %s published twice", rec.Start, topic)
			starts[rec.Start] = true
		}
		assert.Len(t, starts, hours, topic)
	}
	for _, id := range []string{tag + "-gw-north", tag + "-gw-south"} {
		assert.Equal(t, []string{"online"}, seen[config.AvailabilityTopic(prefix, id)], "availability of %s", id)
	}
}
