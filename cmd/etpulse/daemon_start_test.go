package main

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	mochi "github.com/mochi-mqtt/server/v2"
	"github.com/mochi-mqtt/server/v2/listeners"
	"github.com/mochi-mqtt/server/v2/packets"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/demo"
)

// freeAddr returns a loopback address nothing listens on (a port the
// kernel just handed out and took back).
func freeAddr(t *testing.T) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	defer ln.Close()
	return ln.Addr().String()
}

// startBrokerAt starts an embedded broker on addr, closed when the test ends.
func startBrokerAt(t *testing.T, addr string) {
	t.Helper()
	srv := mochi.New(&mochi.Options{Logger: discardLogger()})
	require.NoError(t, srv.AddHook(new(allowAllHook), nil))
	require.NoError(t, srv.AddListener(listeners.NewTCP(listeners.Config{ID: "t", Address: addr})))
	require.NoError(t, srv.Serve())
	t.Cleanup(func() { _ = srv.Close() })
}

func httpGet(url string) (int, string, error) {
	c := http.Client{Timeout: 2 * time.Second}
	resp, err := c.Get(url)
	if err != nil {
		return 0, "", err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	return resp.StatusCode, string(b), err
}

// TestRunObservableBeforeBroker starts `etpulse run` against a loopback
// port where no broker listens: /healthz and /metrics answer at once,
// /readyz answers 503 naming the broker it is connecting to and the last
// error; once a broker listens on that port /readyz turns 200. The run is
// in JSON log format, and every line it writes to stderr, the shutdown
// notice after SIGTERM included, parses as JSON.
func TestRunObservableBeforeBroker(t *testing.T) {
	dir := t.TempDir()
	brokerAddr, httpAddr := freeAddr(t), freeAddr(t)
	sim := demo.New(demo.Options{Seed: 5, TopicRoot: "early", Stations: []string{demo.Paddock}})
	doc := sim.ConfigYAML(demo.ConfigOptions{BrokerURL: "tcp://" + brokerAddr, ClientID: "early-gw", StatePath: filepath.Join(dir, "state.db")})
	doc = strings.Replace(doc, `listen: "127.0.0.1:0"`, `listen: "`+httpAddr+`"`, 1)
	cfgPath := filepath.Join(dir, "farm.yaml")
	require.NoError(t, os.WriteFile(cfgPath, []byte(doc), 0o600))

	logFile, err := os.Create(filepath.Join(dir, "gateway.log"))
	require.NoError(t, err)
	defer logFile.Close()
	done := make(chan int, 1)
	started := time.Now()
	go func() {
		done <- run(context.Background(), []string{"run", "--config", cfgPath, "--log-format", "json"}, strings.NewReader(""), io.Discard, logFile)
	}()
	base := "http://" + httpAddr

	// Poll /healthz while the broker is down (it never comes up by itself).
	var code int
	for deadline := time.Now().Add(15 * time.Second); time.Now().Before(deadline); time.Sleep(20 * time.Millisecond) {
		if code, _, err = httpGet(base + "/healthz"); err == nil {
			break
		}
	}
	require.NoError(t, err, "/healthz never answered while the broker was unreachable")
	assert.Equal(t, http.StatusOK, code)
	t.Logf("/healthz answered %v after start with no broker", time.Since(started).Round(time.Millisecond))
	code, _, err = httpGet(base + "/metrics")
	require.NoError(t, err)
	assert.Equal(t, http.StatusOK, code, "/metrics")

	// /readyz says what it waits for, with the last dial error once one came.
	var body string
	for deadline := time.Now().Add(15 * time.Second); time.Now().Before(deadline); time.Sleep(50 * time.Millisecond) {
		code, body, err = httpGet(base + "/readyz")
		if err == nil && strings.Contains(body, "refused") {
			break
		}
	}
	require.NoError(t, err)
	t.Logf("/readyz while the broker is down:\n%s", body)
	assert.Equal(t, http.StatusServiceUnavailable, code, body)
	assert.Contains(t, body, "mqtt: connecting to tcp://"+brokerAddr, body)
	assert.Contains(t, body, "connection refused", body)
	assert.Contains(t, body, "next attempt in", body)

	startBrokerAt(t, brokerAddr)
	for deadline := time.Now().Add(30 * time.Second); time.Now().Before(deadline); time.Sleep(100 * time.Millisecond) {
		if code, body, err = httpGet(base + "/readyz"); err == nil && code == http.StatusOK {
			break
		}
	}
	require.NoError(t, err)
	assert.Equal(t, http.StatusOK, code, body)

	// The shutdown notice goes through the logger too.
	require.NoError(t, syscall.Kill(os.Getpid(), syscall.SIGTERM))
	select {
	case c := <-done:
		assert.Equal(t, exitOK, c)
	case <-time.After(30 * time.Second):
		t.Fatal("run did not stop after SIGTERM")
	}
	logs, err := os.ReadFile(logFile.Name())
	require.NoError(t, err)
	assertJSONLines(t, logs)
	assert.Contains(t, string(logs), "shutting down")
}

// assertJSONLines fails for every line of logs that is not a JSON object
// with time, level and msg.
func assertJSONLines(t *testing.T, logs []byte) {
	t.Helper()
	sc := bufio.NewScanner(bytes.NewReader(logs))
	sc.Buffer(make([]byte, 1<<20), 1<<20)
	n := 0
	for sc.Scan() {
		n++
		var m map[string]any
		if err := json.Unmarshal(sc.Bytes(), &m); err != nil {
			t.Errorf("log line %d is not JSON: %q", n, sc.Text())
			continue
		}
		for _, k := range []string{"time", "level", "msg"} {
			if _, ok := m[k]; !ok {
				t.Errorf("log line %d has no %q: %q", n, k, sc.Text())
			}
		}
	}
	require.NoError(t, sc.Err())
	assert.Positive(t, n, "no log lines")
}

func discardLogger() *slog.Logger { return slog.New(slog.DiscardHandler) }

// allowAllHook lets every client of the test's loopback broker connect,
// publish and subscribe.
type allowAllHook struct{ mochi.HookBase }

func (h *allowAllHook) ID() string { return "allow-all" }

func (h *allowAllHook) Provides(b byte) bool {
	return b == mochi.OnConnectAuthenticate || b == mochi.OnACLCheck
}

func (h *allowAllHook) OnConnectAuthenticate(*mochi.Client, packets.Packet) bool { return true }

func (h *allowAllHook) OnACLCheck(*mochi.Client, string, bool) bool { return true }

// Durations in log lines are short Go duration strings in both formats,
// never nanosecond counts (JSON) or 7.903066ms (text).
func TestLogDurations(t *testing.T) {
	for format, want := range map[string]string{"json": `"retry_in":"7.9ms"`, "text": `retry_in=7.9ms`} {
		var b bytes.Buffer
		log, err := newLogger(&b, format, "info")
		require.NoError(t, err)
		log.Info("connect failed, retrying", "retry_in", 7903066*time.Nanosecond)
		assert.Contains(t, b.String(), want, format)
	}
}
