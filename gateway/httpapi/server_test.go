package httpapi

import (
	"bytes"
	"context"
	"errors"
	"io"
	"log/slog"
	"net/http"
	"os/exec"
	"path/filepath"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/testutil/promlint"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/alert"
	"etpulse/gateway/config"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/quality"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
)

// start runs a server on a free loopback port until the test ends.
func start(t *testing.T, opt Options) string {
	t.Helper()
	opt.Addr = "127.0.0.1:0"
	s := New(opt)
	require.NoError(t, s.Listen())
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- s.Run(ctx) }()
	t.Cleanup(func() {
		cancel()
		require.NoError(t, <-done)
	})
	return "http://" + s.Addr()
}

func get(t *testing.T, url string) (int, string) {
	t.Helper()
	resp, err := http.Get(url)
	require.NoError(t, err)
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	require.NoError(t, err)
	return resp.StatusCode, string(b)
}

func openDB(t *testing.T) *bbolt.DB {
	t.Helper()
	db, err := state.Open(filepath.Join(t.TempDir(), "state.db"))
	require.NoError(t, err)
	t.Cleanup(func() { require.NoError(t, db.Close()) })
	return db
}

func TestHealthAndReadiness(t *testing.T) {
	db := openDB(t)
	var connected atomic.Bool
	depth := 10
	base := start(t, Options{
		Gatherer: prometheus.NewRegistry(),
		Checks: []Check{
			BrokerConnected(connected.Load),
			StateWritable(db, time.Now),
			OutboxBelowCap(func() (int, time.Duration) { return depth, 90 * time.Second }, 100),
		},
	})

	code, body := get(t, base+"/healthz")
	assert.Equal(t, http.StatusOK, code)
	assert.Equal(t, "ok\n", body)

	code, body = get(t, base+"/readyz")
	assert.Equal(t, http.StatusServiceUnavailable, code)
	assert.Equal(t, "not ready\nbroker: not connected to the MQTT broker\n", body)

	connected.Store(true)
	code, body = get(t, base+"/readyz")
	assert.Equal(t, http.StatusOK, code)
	assert.Equal(t, "ready\n", body)

	depth = 100
	code, body = get(t, base+"/readyz")
	assert.Equal(t, http.StatusServiceUnavailable, code)
	assert.Contains(t, body, "outbox: outbox holds 100 points, cap 100 (oldest waiting 1m30s)")

	code, _ = get(t, base+"/debug/pprof/")
	assert.Equal(t, http.StatusNotFound, code, "no profiling on the metrics port")
}

func TestStateNotWritable(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state.db")
	db, err := state.Open(path)
	require.NoError(t, err)
	require.NoError(t, db.Close())
	ro, err := bbolt.Open(path, 0o600, &bbolt.Options{ReadOnly: true})
	require.NoError(t, err)
	defer ro.Close()
	err = StateWritable(ro, time.Now).Func(context.Background())
	assert.EqualError(t, err, "state file opened read-only")

	// A closed database (e.g. after a fatal storage error) fails the write.
	db2, err := state.Open(filepath.Join(t.TempDir(), "other.db"))
	require.NoError(t, err)
	check := StateWritable(db2, time.Now)
	require.NoError(t, check.Func(context.Background()))
	require.NoError(t, db2.Close())
	assert.ErrorContains(t, check.Func(context.Background()), "state file not writable: database not open")
}

// TestMetricsScrapeIsClean scrapes a registry holding the gateway's metrics
// families that can be built without servers (alerts, outbox, Go and
// process collectors), checks the alert metrics with testutil and lints the
// whole exposition: with promlint always, and with `promtool check metrics`
// when Debian's prometheus package is installed.
func TestMetricsScrapeIsClean(t *testing.T) {
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	db := openDB(t)
	ob, err := store.OpenOutbox(db, store.OutboxOptions{Registerer: reg})
	require.NoError(t, err)

	cfg := &config.Config{Sites: []config.Site{{ID: "brackenfold", Stations: []config.Station{{ID: "orchard", Latitude: 37.2, Longitude: -120.4, UTCOffset: -8}}}}}
	cfg.Alerts.ApplyDefaults()
	mon, err := quality.New(quality.Options{Config: cfg, DB: db, Outbox: ob, Registerer: reg})
	require.NoError(t, err)
	key := alert.Key{Site: "brackenfold", Station: "orchard", Sensor: "valve-3", Quantity: "command", Kind: "command-expired"}
	require.NoError(t, mon.Raise(nil, alert.Alert{Key: key, Message: "command expired after 3 tries", Since: time.Now()}))

	base := start(t, Options{Gatherer: reg})
	code, body := get(t, base+"/metrics")
	require.Equal(t, http.StatusOK, code)
	assert.Contains(t, body, `etpulse_alerts_active{kind="command-expired",quantity="command",sensor="valve-3",severity="warning",site="brackenfold",station="orchard",zone=""} 1`)
	assert.Contains(t, body, `etpulse_alerts_raised_total{kind="command-expired",severity="warning",site="brackenfold"} 1`)
	assert.Contains(t, body, "etpulse_outbox_depth")

	parser := expfmt.NewTextParser(model.LegacyValidation)
	mfs, err := parser.TextToMetricFamilies(strings.NewReader(body))
	require.NoError(t, err, "the exposition parses")
	require.NotEmpty(t, mfs)
	problems, err := promlint.New(strings.NewReader(body)).Lint()
	require.NoError(t, err)
	assert.Empty(t, problems)

	promtool, err := exec.LookPath("promtool")
	if err != nil {
		t.Log("promtool not installed (Debian package prometheus); promlint covered the exposition")
		return
	}
	cmd := exec.Command(promtool, "check", "metrics")
	cmd.Stdin = bytes.NewReader([]byte(body))
	out, err := cmd.CombinedOutput()
	var exit *exec.ExitError
	if errors.As(err, &exit) {
		t.Fatalf("promtool check metrics: %s", out)
	}
	require.NoError(t, err)
}

func TestRunRetriesABusyAddress(t *testing.T) {
	busy := New(Options{Addr: "127.0.0.1:0", Gatherer: prometheus.NewRegistry()})
	require.NoError(t, busy.Listen())
	addr := busy.Addr()

	var logs testenv.Buffer
	s := New(Options{Addr: addr, Gatherer: prometheus.NewRegistry(), Logger: slog.New(slog.NewTextHandler(&logs, nil))})
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- s.Run(ctx) }()
	require.Eventually(t, func() bool { return strings.Contains(logs.String(), "unavailable; retrying") }, 20*time.Second, 10*time.Millisecond)
	assert.Empty(t, s.Addr())
	require.NoError(t, busy.ln.Close()) // the old holder goes away
	require.Eventually(t, func() bool { return s.Addr() == addr }, 20*time.Second, 50*time.Millisecond)
	code, _ := get(t, "http://"+addr+"/healthz")
	assert.Equal(t, http.StatusOK, code)
	cancel()
	require.NoError(t, <-done)

	// Cancelled while still waiting for the address: returns without error.
	blocker := New(Options{Addr: "127.0.0.1:0"})
	require.NoError(t, blocker.Listen())
	defer blocker.ln.Close()
	s2 := New(Options{Addr: blocker.Addr()})
	ctx2, cancel2 := context.WithCancel(context.Background())
	go func() { done <- s2.Run(ctx2) }()
	cancel2()
	require.NoError(t, <-done)
	assert.Empty(t, s2.Addr())
}
