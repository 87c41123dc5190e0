package gateway_test

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
)

// TestDaemonAvailability runs `etpulse run` as a subprocess against
// mosquitto: it says "online" on its availability topic, and after a
// SIGKILL the broker publishes its last will "offline", retained, so an
// automation subscribing later sees a dead gateway. A restart says
// "online" again and a SIGTERM "offline" on the way out.
func TestDaemonAvailability(t *testing.T) {
	url := testenv.MQTT(t)
	dir := t.TempDir()
	bin := buildEtpulse(t, dir)
	root := fmt.Sprintf("avail%d", time.Now().UnixNano())
	sim := demo.New(demo.Options{Seed: 4, TopicRoot: root, Stations: []string{demo.Glasshouse}})
	clientID := root + "-gw"
	cfgPath := filepath.Join(dir, "farm.yaml")
	require.NoError(t, os.WriteFile(cfgPath, []byte("topic_prefix: "+root+"/gw\n"+sim.ConfigYAML(demo.ConfigOptions{
		BrokerURL: url, ClientID: clientID, StatePath: filepath.Join(dir, "s.db")})), 0o600))
	topic := config.AvailabilityTopic(root+"/gw", clientID)

	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	// wait subscribes afresh (a late subscriber: only the retained message
	// and what follows arrive) and waits for want.
	wait := func(want string) {
		t.Helper()
		require.Eventually(t, func() bool {
			w, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: root + "-watch", CleanSession: true})
			if err != nil {
				return false
			}
			defer w.Close(0)
			ch := make(chan mqtt.Message, 4)
			if w.Subscribe(topic, 1, func(m mqtt.Message) { m.Ack(); ch <- m }) != nil {
				return false
			}
			select {
			case m := <-ch:
				return string(m.Payload) == want && m.Retained
			case <-time.After(500 * time.Millisecond):
				return false
			}
		}, 20*time.Second, 50*time.Millisecond, "retained %q on %s", want, topic)
	}

	d := startDaemon(t, bin, cfgPath)
	wait(mqtt.AvailabilityOnline)
	d.kill(t) // SIGKILL: no goodbye reaches the broker
	wait(mqtt.AvailabilityOffline)

	d = startDaemon(t, bin, cfgPath)
	wait(mqtt.AvailabilityOnline)
	assert.Equal(t, 0, d.stop(t))
	wait(mqtt.AvailabilityOffline)
}
