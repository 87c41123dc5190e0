package gateway_test

import (
	"context"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
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
)

// TestZoneAlertsWired runs the composed gateway on the invented farm
// against mosquitto: before any hour has closed its zones have no valid ET,
// so once max_missing_hours have passed since start each raises
// zone-et-stale through the alert monitor (retained topic, metric); the
// first closed hour with ET clears the orchard's zone.
func TestZoneAlertsWired(t *testing.T) {
	url := testenv.MQTT(t)
	prefix := fmt.Sprintf("itzone%d", time.Now().UnixNano())
	sim := demo.New(demo.Options{Seed: 4, TopicRoot: prefix + "/sensors", Stations: []string{demo.Orchard, demo.Paddock},
		DupRate: -1, LateRate: -1, BadRate: -1, ShuffleRate: -1})
	doc := "topic_prefix: " + prefix + "\n" + sim.ConfigYAML(demo.ConfigOptions{StatePath: filepath.Join(t.TempDir(), "s.db"), BrokerURL: url})
	doc = strings.Replace(doc, "  client_id: \"\"\n", "", 1)
	cfg, err := config.Parse([]byte(doc))
	require.NoError(t, err)
	require.NotEmpty(t, cfg.Sites[0].Zones)
	zone := ""
	for _, z := range cfg.Sites[0].Zones {
		if z.Station == demo.Orchard {
			zone = z.ID
		}
	}
	require.NotEmpty(t, zone, "a zone driven by the orchard station")
	for i := range cfg.Sites[0].Zones {
		cfg.Sites[0].Zones[i].FailSafe.MaxMissingHours = 1 // the alert waits this long after start
	}

	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	client, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: prefix + "-gw", Workers: 1, CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { client.Close(time.Second) })

	key := alert.ZoneKey(demo.Site, zone, alert.KindZoneETStale)
	topic := quality.Topic(prefix, key)
	require.Equal(t, prefix+"/"+demo.Site+"/alerts/zones/"+zone+"/et/zone-et-stale", topic)
	watch, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: prefix + "-watch", CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { watch.Close(time.Second) })
	payloads := make(chan string, 10)
	require.NoError(t, watch.Subscribe(topic, 1, func(m mqtt.Message) {
		payloads <- string(m.Payload)
		m.Ack()
	}))
	next := func() string {
		t.Helper()
		select {
		case p := <-payloads:
			return p
		case <-time.After(20 * time.Second):
			t.Fatalf("nothing on %s", topic)
			return ""
		}
	}

	reg := prometheus.NewRegistry()
	clock := demo.NewClock(sim.Start())
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: client, Clock: clock,
		Registerer: reg, Gatherer: reg})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- g.Run(ctx) }()
	defer func() {
		cancel()
		require.NoError(t, <-done)
	}()
	select {
	case <-g.Ready():
	case err := <-done:
		t.Fatalf("gateway stopped: %v", err)
	}

	// No alert at start; one once max_missing_hours have passed without ET.
	clock.Set(sim.Start().Add(61 * time.Minute))
	raised := next()
	assert.Contains(t, raised, `"zone":"`+zone+`"`)
	assert.Contains(t, raised, `"kind":"zone-et-stale"`)
	assert.Contains(t, raised, `"message":"no valid ET since the gateway started 1.0 h ago, limit 1 h; zone holds"`)
	stale := func() float64 {
		mfs, err := reg.Gather()
		require.NoError(t, err)
		var n float64
		for _, mf := range mfs {
			if mf.GetName() == "etpulse_alerts_active" {
				for _, m := range mf.GetMetric() {
					for _, lp := range m.GetLabel() {
						if lp.GetName() == "kind" && lp.GetValue() == "zone-et-stale" {
							n += m.GetGauge().GetValue() // one series per zone alert
						}
					}
				}
			}
		}
		return n
	}
	assert.Equal(t, float64(len(cfg.Sites[0].Zones)), stale(), "one per zone")

	// The first hour closes with ET: the orchard's zone clears.
	msgs := sim.Generate(sim.Start(), sim.Start().Add(70*time.Minute))
	clock.Set(sim.Start().Add(70 * time.Minute))
	publishAll(t, url, prefix+"-pub", msgs)
	assert.Equal(t, "", next(), "cleared: empty retained message")
	assert.Eventually(t, func() bool {
		for _, a := range g.Alerts().Active() {
			if a.Key == key {
				return false
			}
		}
		return true
	}, 10*time.Second, 10*time.Millisecond)
	assert.Less(t, stale(), float64(len(cfg.Sites[0].Zones)))
}
