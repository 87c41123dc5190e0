package gateway_test

import (
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/demo"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/pipeline"
	"etpulse/hourly"
)

// buildEtpulse compiles the etpulse command into dir.
func buildEtpulse(t *testing.T, dir string) string {
	t.Helper()
	bin := filepath.Join(dir, "etpulse")
	// go test puts the go command of the running toolchain first on PATH.
	cmd := exec.Command("go", "build", "-o", bin, "etpulse/cmd/etpulse")
	out, err := cmd.CombinedOutput()
	require.NoError(t, err, "go build: %s", out)
	return bin
}

// daemon is one `etpulse run` process.
type daemon struct {
	cmd    *exec.Cmd
	stderr *testenv.Buffer
	done   chan error
}

func startDaemon(t *testing.T, bin, cfgPath string) *daemon {
	t.Helper()
	d := &daemon{cmd: exec.Command(bin, "run", "--config", cfgPath, "--log-level", "info"), stderr: &testenv.Buffer{}, done: make(chan error, 1)}
	d.cmd.Stderr = d.stderr
	require.NoError(t, d.cmd.Start())
	go func() { d.done <- d.cmd.Wait() }()
	t.Cleanup(func() {
		for _, l := range strings.Split(d.stderr.String(), "\n") {
			if strings.Contains(l, "level=WARN") || strings.Contains(l, "level=ERROR") {
				t.Logf("daemon: %s", l)
			}
		}
		if d.cmd.ProcessState == nil {
			_ = d.cmd.Process.Kill() // by PID: only our own process
			<-d.done
		}
	})
	require.Eventually(t, func() bool { return strings.Contains(d.stderr.String(), "gateway running") }, 20*time.Second, 10*time.Millisecond,
		"daemon did not start: %s", d.stderr.String())
	return d
}

// stop sends SIGTERM and returns the exit code.
func (d *daemon) stop(t *testing.T) int {
	t.Helper()
	require.NoError(t, d.cmd.Process.Signal(syscall.SIGTERM))
	select {
	case <-d.done:
	case <-time.After(30 * time.Second):
		t.Fatalf("daemon did not stop: %s", d.stderr.String())
	}
	return d.cmd.ProcessState.ExitCode()
}

func (d *daemon) kill(t *testing.T) {
	t.Helper()
	require.NoError(t, d.cmd.Process.Signal(syscall.SIGKILL))
	<-d.done
}

// resultLog collects hourly records published under a topic prefix.
type resultLog struct {
	mu   sync.Mutex
	recs map[string]hourly.Record // station/start/revision
	n    int
}

func subscribeResults(t *testing.T, url, clientID, prefix string) *resultLog {
	t.Helper()
	rl := &resultLog{recs: map[string]hourly.Record{}}
	c, err := mqtt.Dial(context.Background(), mqtt.Options{URL: url, ClientID: clientID, CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { c.Close(time.Second) })
	require.NoError(t, c.Subscribe(prefix+"/+/+/hour", 1, func(m mqtt.Message) {
		rec, err := pipeline.UnmarshalRecord(m.Payload)
		if assert.NoError(t, err) {
			rl.mu.Lock()
			rl.recs[fmt.Sprintf("%s/%s/%d", rec.Station, rec.Start.Format(time.RFC3339), rec.Revision)] = rec
			rl.n++
			rl.mu.Unlock()
		}
		m.Ack()
	}))
	return rl
}

// settle waits until no new record arrived for quiet, and returns the count.
func (rl *resultLog) settle(quiet time.Duration) int {
	last, since := -1, time.Now()
	for time.Since(since) < quiet {
		rl.mu.Lock()
		n := rl.n
		rl.mu.Unlock()
		if n != last {
			last, since = n, time.Now()
		}
		time.Sleep(20 * time.Millisecond)
	}
	return last
}

// firstAndFinal returns each hour's first emission and latest revision.
func (rl *resultLog) firstAndFinal() (first, final map[string]hourly.Record) {
	rl.mu.Lock()
	defer rl.mu.Unlock()
	first, final = map[string]hourly.Record{}, map[string]hourly.Record{}
	for _, r := range rl.recs {
		k := r.Station + "/" + r.LocalStart
		if r.Revision == 0 {
			first[k] = r
		}
		if f, ok := final[k]; !ok || r.Revision > f.Revision {
			final[k] = r
		}
	}
	return first, final
}

func publishAll(t *testing.T, url, clientID string, msgs []demo.Message) {
	t.Helper()
	pub := paho.NewClient(paho.NewClientOptions().AddBroker(url).SetClientID(clientID).SetCleanSession(true))
	tok := pub.Connect()
	require.True(t, tok.WaitTimeout(10*time.Second))
	require.NoError(t, tok.Error())
	defer pub.Disconnect(100)
	toks := make([]paho.Token, 0, len(msgs))
	for _, m := range msgs {
		toks = append(toks, pub.Publish(m.Topic, 1, false, m.Payload))
	}
	for _, tk := range toks {
		require.True(t, tk.WaitTimeout(30*time.Second))
		require.NoError(t, tk.Error())
	}
}

// TestRestartAfterKillGivesSameRecords runs `etpulse run` over six hours of
// simulated readings twice: once without interruption, once killed with
// SIGKILL in the middle of an hour and restarted. The broker redelivers what
// was not acknowledged; the hourly records must come out the same.
func TestRestartAfterKillGivesSameRecords(t *testing.T) {
	url := testenv.MQTT(t)
	dir := t.TempDir()
	bin := buildEtpulse(t, dir)
	// Recent readings: the daemon runs on the wall clock.
	start := time.Now().UTC().Truncate(time.Hour).Add(-8 * time.Hour)
	tag := fmt.Sprintf("rs%d", time.Now().UnixNano())

	run := func(name string, kill bool) (first, final map[string]hourly.Record) {
		root := tag + name
		sim := demo.New(demo.Options{Seed: 21, Start: start, TopicRoot: root, Stations: []string{demo.Paddock, demo.Glasshouse}})
		cfgPath := filepath.Join(dir, name+".yaml")
		// A topic prefix of the run's own: other packages' tests run the
		// same invented farm on the shared broker at the same time, and
		// their records on the default prefix would mix with these.
		prefix := root + "-out"
		require.NoError(t, os.WriteFile(cfgPath, []byte("topic_prefix: "+prefix+"\n"+sim.ConfigYAML(demo.ConfigOptions{
			BrokerURL: url, ClientID: root + "-gw", StatePath: filepath.Join(dir, name+".db"),
			LateWindow: 12 * time.Hour, SilenceClose: 24 * time.Hour,
		})), 0o600))
		results := subscribeResults(t, url, root+"-results", prefix)
		msgs := sim.Generate(start, start.Add(6*time.Hour+10*time.Minute))

		d := startDaemon(t, bin, cfgPath)
		if kill {
			// Mid-hour: 3 h 27 min of readings, then SIGKILL while they are handled.
			cut := 0
			for cut < len(msgs) && msgs[cut].At.Before(start.Add(3*time.Hour+27*time.Minute)) {
				cut++
			}
			publishAll(t, url, root+"-pub", msgs[:cut])
			time.Sleep(150 * time.Millisecond)
			d.kill(t)
			t.Logf("%s: killed after %d of %d messages published; records so far %d", name, cut, len(msgs), results.settle(300*time.Millisecond))
			d = startDaemon(t, bin, cfgPath)
			msgs = msgs[cut:]
		}
		publishAll(t, url, root+"-pub", msgs)
		n := results.settle(3 * time.Second)
		assert.Equal(t, 0, d.stop(t), "graceful shutdown exits 0: %s", d.stderr.String())
		t.Logf("%s: %d records", name, n)
		return results.firstAndFinal()
	}

	firstA, finalA := run("a", false)
	firstB, finalB := run("b", true)
	require.Len(t, firstA, 12, "six hours, two stations")
	require.Equal(t, len(firstA), len(firstB))
	for k, a := range firstA {
		b, ok := firstB[k]
		require.True(t, ok, k)
		assert.Equal(t, a.Stats, b.Stats, "%s first emission", k)
		assert.Equal(t, a.Result, b.Result, "%s first emission", k)
		assert.Equal(t, a.Flags, b.Flags, "%s flags", k)
		assert.Equal(t, a.Carry, b.Carry, "%s carry", k)
		assert.Equal(t, finalA[k].Result, finalB[k].Result, "%s latest revision", k)
		assert.Equal(t, finalA[k].Stats, finalB[k].Stats, "%s latest revision", k)
	}
}
