package gateway_test

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/alert"
	"etpulse/gateway/demo"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/quality"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// smallDisk mounts a tmpfs of size bytes on a fresh directory and unmounts
// it at cleanup; it skips the test where mounting is not allowed.
func smallDisk(t *testing.T, size string) string {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "disk")
	require.NoError(t, os.Mkdir(dir, 0o755))
	if err := syscall.Mount("tmpfs", dir, "tmpfs", 0, "size="+size); err != nil {
		t.Skipf("cannot mount a small tmpfs for the disk-full test (needs root or CAP_SYS_ADMIN): %v", err)
	}
	t.Cleanup(func() {
		if err := syscall.Unmount(dir, 0); err != nil {
			t.Errorf("unmount %s: %v", dir, err)
		}
	})
	return dir
}

// fill writes a file in dir until the disk is full and returns its path.
func fill(t *testing.T, dir string) string {
	t.Helper()
	path := filepath.Join(dir, "filler")
	f, err := os.Create(path)
	require.NoError(t, err)
	defer f.Close()
	buf := make([]byte, 4096)
	for {
		if _, err := f.Write(buf); err != nil {
			require.True(t, errors.Is(err, syscall.ENOSPC), "filling the disk: %v", err)
			return path
		}
	}
}

// freePort returns a loopback address with a port free a moment ago.
func freePort(t *testing.T) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	addr := ln.Addr().String()
	require.NoError(t, ln.Close())
	return addr
}

func gaugeValue(t *testing.T, g prometheus.Gatherer, name string) (float64, bool) {
	t.Helper()
	mfs, err := g.Gather()
	require.NoError(t, err)
	for _, mf := range mfs {
		if mf.GetName() == name {
			for _, m := range mf.GetMetric() {
				return m.GetGauge().GetValue(), true
			}
		}
	}
	return 0, false
}

func readyz(t *testing.T, addr string) (int, string) {
	t.Helper()
	resp, err := http.Get("http://" + addr + "/readyz")
	if err != nil {
		return 0, err.Error()
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, string(b)
}

// TestDiskFullPausesIntake fills the state file's disk (a small tmpfs) while
// the gateway runs: intake pauses without acknowledging, a critical
// state-disk-full alert is published, /readyz answers 503 naming the cause,
// the paused metric is 1 and Run does not return; once space is freed the
// held messages are stored and acknowledged, the alert clears, /readyz is
// 200 again, and no reading is lost.
func TestDiskFullPausesIntake(t *testing.T) {
	disk := smallDisk(t, "3m")
	srv, url, err := demo.StartBroker(true)
	require.NoError(t, err)
	t.Cleanup(func() { _ = srv.Close() })
	diskFull(t, disk, url, "diskfull", 0, 0, 0)
}

// The same against mosquitto with a 2 s keep-alive, a queue of 8 messages
// and a full disk for 10 s: the broker stops sending once its window of
// unacknowledged QoS 1 messages is full and keeps the rest; the connection
// stays up (keep-alives still flow), the held messages are acknowledged
// after the resume, the broker sends the rest, and nothing is lost. (Had
// the connection dropped, the broker would redeliver the unacknowledged
// messages and the stored copies would be dropped as duplicates.)
func TestDiskFullPausesIntakeMosquitto(t *testing.T) {
	url := testenv.MQTT(t)
	disk := smallDisk(t, "3m")
	diskFull(t, disk, url, fmt.Sprintf("diskfullmq%d", time.Now().UnixNano()%1e9), 2*time.Second, 10*time.Second, 8)
}

// diskFull runs the disk-full scenario on the broker at url with topics
// under root: the gateway's client uses keepAlive (0: the default), and the
// disk stays full for at least hold after intake reports the pause; the
// gateway's queue holds queue messages (0: the default).
func diskFull(t *testing.T, disk, url, root string, keepAlive, hold time.Duration, queue int) {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()

	sim := demo.New(demo.Options{Seed: 7, TopicRoot: root, Stations: []string{demo.Orchard, demo.Paddock},
		DupRate: -1, LateRate: -1, BadRate: -1, ShuffleRate: -1})
	// The test's clock jumps three hours at once: with the default
	// silence_close a station whose readings are still on their way would
	// be closed as silent, which is not what this test is about.
	cfg, err := sim.Config(demo.ConfigOptions{BrokerURL: url, ClientID: root + "-gw", StatePath: filepath.Join(disk, "s.db"),
		SilenceClose: 24 * time.Hour})
	require.NoError(t, err)
	httpAddr := freePort(t)
	cfg.HTTP.Disabled = false
	cfg.HTTP.Listen = httpAddr
	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	reg := prometheus.NewRegistry()
	client, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: root + "-gw", Workers: 1, KeepAlive: keepAlive, Registerer: reg})
	require.NoError(t, err)
	t.Cleanup(func() { client.Close(time.Second) })

	// Alert topics as a farm's operator sees them.
	watch, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: root + "-watch", CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { watch.Close(time.Second) })
	key := alert.StateKey(demo.Site, alert.KindStateDiskFull)
	topic := quality.Topic(cfg.Alerts.TopicPrefix, key)
	var amu sync.Mutex
	var payloads []string
	require.NoError(t, watch.Subscribe(topic, 1, func(m mqtt.Message) {
		amu.Lock()
		payloads = append(payloads, string(m.Payload))
		amu.Unlock()
		m.Ack()
	}))
	lastPayload := func() (string, int) {
		amu.Lock()
		defer amu.Unlock()
		if len(payloads) == 0 {
			return "", 0
		}
		return payloads[len(payloads)-1], len(payloads)
	}

	clk := demo.NewClock(sim.Start())
	var rmu sync.Mutex
	recs := map[string]hourly.Record{} // latest revision per station and hour
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: client, Clock: clk, Registerer: reg, Gatherer: reg, QueueSize: queue,
		OnRecord: func(r hourly.Record) {
			rmu.Lock()
			recs[r.Station+" "+r.Start.Format(time.RFC3339)] = r
			rmu.Unlock()
		}})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- g.Run(ctx) }()
	select {
	case <-g.Ready():
	case err := <-done:
		t.Fatalf("gateway stopped: %v", err)
	}
	publish := func(msgs []demo.Message) { publishAll(t, url, root+"-pub", msgs) }
	waitHandled := func(n int) {
		t.Helper()
		require.Eventually(t, func() bool { return g.Handled() == uint64(n) }, 30*time.Second, 5*time.Millisecond,
			"handled %d of %d", g.Handled(), n)
	}

	// Before: all is well.
	first := sim.Generate(sim.Start(), sim.Start().Add(10*time.Minute))
	clk.Set(sim.Start().Add(10 * time.Minute))
	publish(first)
	waitHandled(len(first))
	require.Eventually(t, func() bool { code, _ := readyz(t, httpAddr); return code == http.StatusOK }, 10*time.Second, 20*time.Millisecond)

	// The disk fills; three hours more readings arrive.
	filler := fill(t, disk)
	rest := sim.Generate(sim.Start().Add(10*time.Minute), sim.Start().Add(190*time.Minute))
	clk.Set(sim.Start().Add(190 * time.Minute))
	publish(rest)

	require.Eventually(t, func() bool {
		select {
		case err := <-done:
			t.Errorf("gateway stopped on a full disk: %v", err)
			return true
		default:
		}
		v, ok := gaugeValue(t, reg, "etpulse_intake_paused")
		return ok && v == 1
	}, 20*time.Second, 10*time.Millisecond, "intake never reported paused")
	require.False(t, t.Failed())
	require.Eventually(t, func() bool { p, _ := lastPayload(); return strings.Contains(p, `"state":"active"`) },
		20*time.Second, 10*time.Millisecond, "no active alert on %s", topic)
	p, _ := lastPayload()
	var a map[string]any
	require.NoError(t, json.Unmarshal([]byte(p), &a))
	assert.Equal(t, "critical", a["severity"])
	assert.Equal(t, string(alert.KindStateDiskFull), a["kind"])
	assert.Contains(t, a["message"], "free space")
	// Steadily not ready, with the reason.
	for range 5 {
		code, body := readyz(t, httpAddr)
		assert.Equal(t, http.StatusServiceUnavailable, code, body)
		assert.Contains(t, body, "intake paused")
		assert.Contains(t, body, "no space left")
		time.Sleep(100 * time.Millisecond)
	}
	time.Sleep(hold)
	handledPaused := g.Handled()
	assert.Less(t, handledPaused, uint64(len(first)+len(rest)), "every message acknowledged on a full disk")
	select {
	case err := <-done:
		t.Fatalf("gateway stopped on a full disk: %v", err)
	default:
	}

	// Space is freed: intake resumes by itself.
	require.NoError(t, os.Remove(filler))
	waitHandled(len(first) + len(rest))
	require.Eventually(t, func() bool { v, _ := gaugeValue(t, reg, "etpulse_intake_paused"); return v == 0 },
		10*time.Second, 10*time.Millisecond)
	require.Eventually(t, func() bool { p, _ := lastPayload(); return p == "" }, 20*time.Second, 10*time.Millisecond,
		"alert not cleared on %s", topic)
	require.Eventually(t, func() bool { code, _ := readyz(t, httpAddr); return code == http.StatusOK }, 10*time.Second, 20*time.Millisecond)

	// Nothing lost: every closed hour counts every reading published for it.
	assert.Zero(t, sumMetric(t, reg, "etpulse_messages_rejected_total"), "readings rejected")
	want := map[string]map[hourly.Quantity]int{}
	for _, m := range append(first, rest...) {
		for _, tr := range m.Samples {
			k := tr.Station + " " + tr.Sample.Time.Truncate(time.Hour).Format(time.RFC3339)
			if want[k] == nil {
				want[k] = map[hourly.Quantity]int{}
			}
			want[k][tr.Sample.Quantity]++
		}
	}
	require.Eventually(t, func() bool { rmu.Lock(); defer rmu.Unlock(); return len(recs) >= 4 }, 20*time.Second, 10*time.Millisecond,
		"two hours of two stations closed")
	rmu.Lock()
	for k, r := range recs {
		assert.True(t, r.Complete, k)
		for q, n := range want[k] {
			assert.Equal(t, n, r.Stats[q].Count, "%s %s: readings stored", k, q)
		}
	}
	rmu.Unlock()
	cancel()
	require.NoError(t, <-done)
	assert.Equal(t, uint64(len(first)+len(rest)), g.Handled(), fmt.Sprintf("handled while paused: %d", handledPaused))
	t.Logf("messages %d, handled while paused %d, reconnects %g, duplicates dropped %g", len(first)+len(rest), handledPaused,
		sumMetric(t, reg, "etpulse_mqtt_reconnects_total"), sumMetric(t, reg, "etpulse_readings_duplicate_total"))
}
