package gateway_test

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"net/http"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/testutil/promlint"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/demo"
	"etpulse/gateway/httpapi"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
)

// TestWholeRegistryScrape composes the whole gateway (pipeline, store,
// alerts, MQTT client) on one registry, feeds it two simulated hours with
// an injected fault through the real mosquitto, scrapes /metrics over a real
// listener and checks the exposition: parsed, linted with promlint, and
// with `promtool check metrics` (Debian package prometheus) when installed.
func TestWholeRegistryScrape(t *testing.T) {
	url := testenv.MQTT(t)
	id := fmt.Sprintf("metrics-%d", time.Now().UnixNano())
	sim := demo.New(demo.Options{Seed: 5, TopicRoot: id, Faults: map[string]demo.Fault{
		demo.Orchard + "/air": func(_ time.Time, v float64) float64 { return v - 70 }, // below the plausible range, accepted by ingest
	}})
	dir := t.TempDir()
	cfg, err := sim.Config(demo.ConfigOptions{BrokerURL: url, ClientID: id, StatePath: filepath.Join(dir, "state.db")})
	require.NoError(t, err)
	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	defer db.Close()

	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	client, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: id, CleanSession: true, Registerer: reg})
	require.NoError(t, err)
	defer client.Close(time.Second)
	pub, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: id + "-pub", CleanSession: true})
	require.NoError(t, err)
	defer pub.Close(time.Second)

	clock := demo.NewClock(sim.Start())
	g, err := gateway.New(cfg, gateway.Deps{Registerer: reg, Gatherer: reg, DB: db, MQTT: client, Clock: clock})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- g.Run(ctx) }()
	select {
	case <-g.Ready():
	case err := <-done:
		t.Fatalf("gateway stopped: %v", err)
	}

	end := sim.Start().Add(2 * time.Hour)
	msgs := sim.Generate(sim.Start(), end)
	for _, m := range msgs {
		require.NoError(t, pub.Publish(ctx, m.Topic, 1, false, m.Payload))
	}
	require.Eventually(t, func() bool { return g.Handled() >= uint64(len(msgs)) }, 60*time.Second, 10*time.Millisecond)
	clock.Set(end.Add(30 * time.Minute)) // closes both hours
	require.Eventually(t, func() bool { return g.Emitted() >= 6 }, 60*time.Second, 10*time.Millisecond)
	require.Eventually(t, func() bool { return len(g.Alerts().Active()) > 0 }, 60*time.Second, 10*time.Millisecond)

	srv := httpapi.New(httpapi.Options{Addr: "127.0.0.1:0", Gatherer: reg})
	require.NoError(t, srv.Listen())
	sctx, stop := context.WithCancel(ctx)
	sdone := make(chan error, 1)
	go func() { sdone <- srv.Run(sctx) }()
	resp, err := http.Get("http://" + srv.Addr() + "/metrics")
	require.NoError(t, err)
	body, err := io.ReadAll(resp.Body)
	resp.Body.Close()
	require.NoError(t, err)
	stop()
	require.NoError(t, <-sdone)
	cancel()
	require.NoError(t, <-done)

	text := string(body)
	for _, name := range []string{
		"etpulse_alerts_active", "etpulse_alerts_raised_total", "etpulse_messages_received_total",
		"etpulse_records_closed_total", "etpulse_outbox_depth", "etpulse_mqtt_connected",
	} {
		assert.Contains(t, text, "\n"+name, name)
	}
	assert.Contains(t, text, `etpulse_alerts_raised_total{kind="range",severity="critical",site="`+demo.Site+`"} 1`)
	assert.Regexp(t, `\netpulse_alerts_active\{kind="range",quantity="air_temp",sensor="[^"]+",severity="critical",site="`+demo.Site+`",station="`+demo.Orchard+`",zone=""\} 1\n`, text,
		"an alert rule can name the sensor at fault")
	assert.Contains(t, text, `etpulse_messages_received_total{site="`+demo.Site+`",station="`+demo.Orchard+`"}`)

	parser := expfmt.NewTextParser(model.LegacyValidation)
	mfs, err := parser.TextToMetricFamilies(strings.NewReader(text))
	require.NoError(t, err)
	assert.Greater(t, len(mfs), 20)
	problems, err := promlint.New(strings.NewReader(text)).Lint()
	require.NoError(t, err)
	for _, p := range problems {
		t.Errorf("lint: %s %s", p.Metric, p.Text)
	}
	promtool, err := exec.LookPath("promtool")
	if err != nil {
		t.Log("promtool not installed (Debian package prometheus); promlint checked the exposition")
		return
	}
	cmd := exec.Command(promtool, "check", "metrics")
	cmd.Stdin = bytes.NewReader(body)
	out, err := cmd.CombinedOutput()
	for _, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
		if line != "" {
			t.Errorf("promtool check metrics: %s", line)
		}
	}
	if err != nil && len(strings.TrimSpace(string(out))) == 0 {
		t.Errorf("promtool check metrics: %v", err)
	}
}
