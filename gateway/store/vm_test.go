package store

import (
	"bufio"
	"encoding/json"
	"fmt"
	"net"
	"net/http"
	"net/url"
	"os/exec"
	"strconv"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"etpulse/gateway/internal/testenv"
)

// vmProc is a victoria-metrics process a test started itself (on loopback,
// a free port and a temp data dir); it is stopped by PID.
type vmProc struct {
	bin, dir string
	port     int
	cmd      *exec.Cmd
}

func (v *vmProc) url() string { return "http://127.0.0.1:" + strconv.Itoa(v.port) }

func freePort(t testing.TB) int {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	port := l.Addr().(*net.TCPAddr).Port
	require.NoError(t, l.Close())
	return port
}

// startOwnVM starts a private victoria-metrics; t.Cleanup stops it.
func startOwnVM(t testing.TB) *vmProc {
	t.Helper()
	v := &vmProc{bin: testenv.Victoria(t), dir: t.TempDir(), port: freePort(t)}
	v.start(t)
	t.Cleanup(func() { v.stop(t) })
	return v
}

func (v *vmProc) start(t testing.TB) {
	t.Helper()
	v.cmd = exec.Command(v.bin, "-httpListenAddr=127.0.0.1:"+strconv.Itoa(v.port), "-storageDataPath="+v.dir,
		"-retentionPeriod=100y", "-search.latencyOffset=0s", "-loggerLevel=ERROR")
	require.NoError(t, v.cmd.Start())
	deadline := time.Now().Add(15 * time.Second)
	for {
		resp, err := http.Get(v.url() + "/health")
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				break
			}
		}
		require.Nil(t, v.cmd.ProcessState, "victoria-metrics exited during start-up")
		require.True(t, time.Now().Before(deadline), "victoria-metrics not ready on port %d", v.port)
		time.Sleep(50 * time.Millisecond)
	}
}

// stop ends the process by its PID (SIGTERM, then waits).
func (v *vmProc) stop(t testing.TB) {
	t.Helper()
	if v.cmd == nil {
		return
	}
	_ = v.cmd.Process.Signal(syscall.SIGTERM)
	_ = v.cmd.Wait()
	v.cmd = nil
}

// vmSeries is one series of /api/v1/export.
type vmSeries struct {
	Metric     map[string]string `json:"metric"`
	Values     []float64         `json:"values"`
	Timestamps []int64           `json:"timestamps"`
}

// exportVM reads every series matching selector through the server's own
// export API.
func exportVM(t testing.TB, base, selector string) []vmSeries {
	t.Helper()
	resp, err := http.Get(base + "/api/v1/export?match[]=" + url.QueryEscape(selector))
	require.NoError(t, err)
	defer resp.Body.Close()
	require.Equal(t, http.StatusOK, resp.StatusCode)
	var out []vmSeries
	sc := bufio.NewScanner(resp.Body)
	sc.Buffer(make([]byte, 1<<20), 64<<20)
	for sc.Scan() {
		var s vmSeries
		require.NoError(t, json.Unmarshal(sc.Bytes(), &s))
		out = append(out, s)
	}
	require.NoError(t, sc.Err())
	return out
}

// samples counts the samples of a set of series.
func samples(ss []vmSeries) int {
	n := 0
	for _, s := range ss {
		n += len(s.Timestamps)
	}
	return n
}

// waitVM flushes the server and polls the export until at least want
// samples match selector (new series take seconds to become readable).
func waitVM(t testing.TB, base, selector string, want int) []vmSeries {
	t.Helper()
	deadline := time.Now().Add(40 * time.Second)
	for {
		resp, err := http.Get(base + "/internal/force_flush")
		require.NoError(t, err)
		resp.Body.Close()
		ss := exportVM(t, base, selector)
		if samples(ss) >= want || time.Now().After(deadline) {
			return ss
		}
		time.Sleep(300 * time.Millisecond)
	}
}

// byName indexes series by metric name; the selector must pick one series
// per name.
func byName(t testing.TB, ss []vmSeries) map[string]vmSeries {
	t.Helper()
	m := map[string]vmSeries{}
	for _, s := range ss {
		name := s.Metric["__name__"]
		_, dup := m[name]
		require.False(t, dup, "two series named %s: %v", name, s.Metric)
		m[name] = s
	}
	return m
}

// uniqueSite returns a site id no other test run uses on a shared server.
func uniqueSite(prefix string) string {
	return fmt.Sprintf("%s-%d", prefix, time.Now().UnixNano())
}
