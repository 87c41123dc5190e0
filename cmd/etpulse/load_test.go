package main

import (
	"bytes"
	"compress/gzip"
	"context"
	"encoding/json"
	"io"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestLoadJSON runs `etpulse load` small on the embedded broker and reads
// its JSON summary. No timing is checked, only that everything is accounted
// for.
func TestLoadJSON(t *testing.T) {
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"load", "--stations", "3", "--messages", "3000", "--interval", "1m",
		"--bad", "2", "--json", "--every", "0", "--no-bare"}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, "stderr: %s", errOut.String())
	var sum struct {
		Consistent  bool               `json:"consistent"`
		Published   int64              `json:"messages_published"`
		Acked       int64              `json:"messages_acked"`
		Rejected    map[string]float64 `json:"rejected"`
		HoursClosed int                `json:"hours_closed"`
		Records     int                `json:"records_published"`
		MsgPerS     float64            `json:"msg_per_s"`
		AckP99      float64            `json:"ack_latency_p99_ms"`
		PeakHeap    uint64             `json:"peak_heap_bytes"`
		Bare        *struct{}          `json:"bare"`
	}
	require.NoError(t, json.Unmarshal(out.Bytes(), &sum), out.String())
	assert.True(t, sum.Consistent)
	// (3000 - 2) / 6 messages a tick = 499 ticks of one simulated minute:
	// 8 hours closed at each of the 3 stations.
	assert.Equal(t, int64(499*6+2), sum.Published)
	assert.Equal(t, sum.Published, sum.Acked)
	assert.Equal(t, map[string]float64{"unparseable": 2}, sum.Rejected)
	assert.Equal(t, 24, sum.HoursClosed)
	assert.Equal(t, 24, sum.Records)
	assert.Positive(t, sum.MsgPerS)
	assert.Positive(t, sum.AckP99)
	assert.Positive(t, sum.PeakHeap)
	assert.Nil(t, sum.Bare, "--no-bare skips the bare subscriber")
}

// TestLoadBare runs the bare subscriber's phase before the gateway's and
// prints the ratio; the network size goes to 10,000 stations.
func TestLoadBare(t *testing.T) {
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"load", "--stations", "3", "--messages", "1200", "--interval", "1m",
		"--bare-duration", "30s", "--every", "0"}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, "stderr: %s", errOut.String())
	for _, want := range []string{"bare subscriber   1200 of 1200 messages", "gateway / bare    ", "hour close        p50 ", "written           "} {
		assert.Contains(t, out.String(), want)
	}

	out.Reset()
	errOut.Reset()
	code = run(context.Background(), []string{"load", "--stations", "10001"}, nil, &out, &errOut)
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errOut.String(), "stations must be 1-10000, got 10001")
}

func TestLoadRefusesRemoteBroker(t *testing.T) {
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"load", "--broker", "tcp://10.20.30.40:1883"}, nil, &out, &errOut)
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errOut.String(), `broker host "10.20.30.40" is not a loopback address`)
	assert.Empty(t, out.String())

	errOut.Reset()
	code = run(context.Background(), []string{"load", "--duration", "20m"}, nil, &out, &errOut)
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errOut.String(), "duration must be at most 10m0s, got 20m0s")
}

// TestLoadProfiles writes a CPU and a heap profile of the gateway phase
// (gzip-compressed pprof protobufs naming the gateway's code), and names the
// flag when a profile file cannot be created.
func TestLoadProfiles(t *testing.T) {
	dir := t.TempDir()
	cpu, heap, peak := filepath.Join(dir, "cpu.pprof"), filepath.Join(dir, "heap.pprof"), filepath.Join(dir, "peak.pprof")
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"load", "--stations", "3", "--messages", "1200", "--interval", "1m",
		"--no-bare", "--every", "0", "--cpuprofile", cpu, "--memprofile", heap, "--memprofile-peak", peak}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, "stderr: %s", errOut.String())
	for path, want := range map[string]string{cpu: "samples", heap: "inuse_space", peak: "inuse_space"} {
		raw, err := os.ReadFile(path)
		require.NoError(t, err)
		zr, err := gzip.NewReader(bytes.NewReader(raw))
		require.NoError(t, err, path)
		body, err := io.ReadAll(zr)
		require.NoError(t, err, path)
		assert.Contains(t, string(body), want, path)
		assert.Contains(t, string(body), "etpulse/gateway", path)
	}

	errOut.Reset()
	code = run(context.Background(), []string{"load", "--stations", "3", "--messages", "60", "--no-bare",
		"--cpuprofile", filepath.Join(dir, "missing", "cpu.pprof")}, nil, &out, &errOut)
	assert.Equal(t, exitError, code)
	assert.Contains(t, errOut.String(), "--cpuprofile: open ")
}
