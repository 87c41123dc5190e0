package faults_test

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/demo"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/pipeline"
	"etpulse/hourly"
)

// streamHours is the length of the scripted sensor stream; two stations
// (orchard, paddock) close one record each per hour.
const streamHours = 6

// script is the scripted sensor stream every fault replays: the demo's
// invented farm, seed 15, without injected duplicates, late or malformed
// messages, so that every difference from the undisturbed run is the fault's.
type script struct {
	start time.Time // first reading, a whole hour, streamHours+1 h before now
	msgs  []demo.Message
	sim   *demo.Sim
}

func newScript() *script {
	start := time.Now().UTC().Truncate(time.Hour).Add(-(streamHours + 1) * time.Hour)
	sim := demo.New(demo.Options{Seed: 15, Start: start, Stations: []string{demo.Orchard, demo.Paddock},
		DupRate: -1, LateRate: -1, BadRate: -1, ShuffleRate: -1})
	return &script{start: start, sim: sim, msgs: sim.Generate(start, start.Add(streamHours*time.Hour+10*time.Minute))}
}

// hours is the number of records (first emissions) the stream closes.
func (s *script) hours() int { return 2 * streamHours }

// cfgOptions are the settings a fault changes in the gateway configuration.
type cfgOptions struct {
	broker, clientID, state string
	httpPort                int
	storeURL                string
	silenceClose            time.Duration // default 24 h: no silence closes during a test
}

// config returns the gateway configuration of the script's farm: its two
// zones water all day from an initial depletion above the trigger, capped by
// max_minutes, so the first decision orders the same run in every run of the
// script whatever the wall-clock moment (no cycles, no weather holds).
func (s *script) config(o cfgOptions) string {
	if o.silenceClose == 0 {
		o.silenceClose = 24 * time.Hour
	}
	y := s.sim.ConfigYAML(demo.ConfigOptions{BrokerURL: o.broker, ClientID: o.clientID, StatePath: o.state,
		LateWindow: 12 * time.Hour, SilenceClose: o.silenceClose})
	y = strings.Replace(y, `listen: "127.0.0.1:0"`, fmt.Sprintf(`listen: "127.0.0.1:%d"`, o.httpPort), 1)
	if o.storeURL != "" {
		y = strings.Replace(y, "\nsites:\n", fmt.Sprintf("\nstore:\n  url: %q\n  org: farm\n  bucket: etpulse\n  flush_interval: 100ms\n  max_backoff: 1s\nsites:\n", o.storeURL), 1)
	}
	for _, r := range [][2]string{
		{`windows: ["20:00-06:00"]`, `windows: ["00:00-24:00"]`},
		{`windows: ["21:00-05:00"]`, `windows: ["00:00-24:00"]`},
		{"initial_depletion_mm: 4}", "initial_depletion_mm: 30}"},
		{"initial_depletion_mm: 16}", "initial_depletion_mm: 40}"},
		// Two-minute runs: a finished report may claim no more minutes
		// than have passed since the start plus the 2 min clock allowance.
		{"          min_minutes: 15\n          max_minutes: 180\n", "          min_minutes: 1\n          max_minutes: 2\n"},
		{"          min_minutes: 10\n          max_minutes: 120\n", "          min_minutes: 1\n          max_minutes: 2\n"},
		{"          cycle_minutes: 40\n          soak_minutes: 20\n", ""},
		{"        weather_holds: {frost_below_c: 1}\n", ""},
		{"        weather_holds: {wind_max_m_s: 8, frost_below_c: 1}\n", ""},
	} {
		if !strings.Contains(y, r[0]) {
			panic("faults: the demo configuration changed; update script.config: " + r[0])
		}
		y = strings.Replace(y, r[0], r[1], 1)
	}
	return y
}

// freePort returns a loopback TCP port nothing listens on right now.
func freePort(t *testing.T) int {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port
}

// gw is one gateway instance of a fault: its configuration and state file,
// and the `etpulse run` process currently running it, if any.
type gw struct {
	t       *testing.T
	bin     string
	cfgPath string
	state   string
	port    int

	mu     sync.Mutex
	cmd    *exec.Cmd
	done   chan struct{}
	stderr *testenv.Buffer
	starts int
}

// newGW writes the configuration of a gateway into dir.
func newGW(t *testing.T, bin, dir string, s *script, o cfgOptions) *gw {
	t.Helper()
	g := &gw{t: t, bin: bin, cfgPath: filepath.Join(dir, "etpulse.yaml"), port: freePort(t)}
	if o.state == "" {
		o.state = filepath.Join(dir, "state.db")
	}
	g.state = o.state
	o.httpPort = g.port
	if o.clientID == "" {
		o.clientID = "faults-gw"
	}
	require.NoError(t, os.WriteFile(g.cfgPath, []byte(s.config(o)), 0o600))
	t.Cleanup(func() {
		g.mu.Lock()
		cmd, done := g.cmd, g.done
		g.mu.Unlock()
		if cmd != nil {
			_ = cmd.Process.Kill() // by PID: our own process only
			<-done
		}
	})
	return g
}

// start runs `etpulse run` and waits for it to say it is running.
func (g *gw) start() {
	t := g.t
	t.Helper()
	cmd := exec.Command(g.bin, "run", "--config", g.cfgPath, "--log-level", "info")
	buf := &testenv.Buffer{}
	cmd.Stderr = buf
	require.NoError(t, cmd.Start())
	done := make(chan struct{})
	go func() { _ = cmd.Wait(); close(done) }()
	g.mu.Lock()
	g.cmd, g.done, g.stderr = cmd, done, buf
	g.starts++
	g.mu.Unlock()
	deadline := time.Now().Add(30 * time.Second)
	for !strings.Contains(buf.String(), "gateway running") {
		select {
		case <-done:
			t.Fatalf("gateway exited during start-up (%v):\n%s", cmd.ProcessState, tail(buf.String()))
		case <-time.After(10 * time.Millisecond):
		}
		if time.Now().After(deadline) {
			t.Fatalf("gateway did not start within 30 s:\n%s", tail(buf.String()))
		}
	}
}

// signal sends sig to the running process and waits for it to exit; it
// returns the exit code (-1 when killed by a signal).
func (g *gw) signal(sig syscall.Signal) int {
	t := g.t
	t.Helper()
	g.mu.Lock()
	cmd, done := g.cmd, g.done
	g.cmd, g.done = nil, nil
	g.mu.Unlock()
	require.NotNil(t, cmd, "no gateway running")
	require.NoError(t, cmd.Process.Signal(sig))
	select {
	case <-done:
	case <-time.After(60 * time.Second):
		_ = cmd.Process.Kill()
		<-done
		t.Fatalf("gateway did not exit within 60 s of %v:\n%s", sig, tail(g.stderr.String()))
	}
	return cmd.ProcessState.ExitCode()
}

// exited reports whether the process started last has exited.
func (g *gw) exited() bool {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.done == nil {
		return true
	}
	select {
	case <-g.done:
		return true
	default:
		return false
	}
}

// log returns the stderr of the process started last.
func (g *gw) log() string {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.stderr == nil {
		return ""
	}
	return g.stderr.String()
}

// export runs `etpulse export` over the script's period for the given
// measurements: through the running gateway (live) or from the state file
// of a stopped one. It returns the CSV rows as maps.
func (g *gw) export(s *script, live bool, measurements string) ([]map[string]string, error) {
	args := []string{"export", "--from", s.start.Add(-48 * time.Hour).Format(time.RFC3339),
		"--to", time.Now().Add(48 * time.Hour).UTC().Format(time.RFC3339), "--measurement", measurements}
	if live {
		args = append(args, "--config", g.cfgPath)
	} else {
		args = append(args, "--state", g.state)
	}
	var out, errb bytes.Buffer
	cmd := exec.Command(g.bin, args...)
	cmd.Stdout, cmd.Stderr = &out, &errb
	if err := cmd.Run(); err != nil {
		return nil, fmt.Errorf("etpulse export: %w: %s", err, errb.String())
	}
	recs, err := csv.NewReader(&out).ReadAll()
	if err != nil {
		return nil, fmt.Errorf("etpulse export: read csv: %w", err)
	}
	var rows []map[string]string
	for _, r := range recs[min(1, len(recs)):] {
		m := map[string]string{}
		for i, k := range recs[0] {
			m[k] = r[i]
		}
		rows = append(rows, m)
	}
	return rows, nil
}

func tail(s string) string {
	lines := strings.Split(strings.TrimSpace(s), "\n")
	return strings.Join(lines[max(0, len(lines)-30):], "\n")
}

// hourKey names one hour of one station.
func hourKey(r hourly.Record) string { return r.Station + "/" + r.Start.Format(time.RFC3339) }

// content is what must not differ between two emissions of one revision,
// and between the undisturbed and the disturbed run's latest revisions.
func content(r hourly.Record) string {
	b, _ := json.Marshal(struct {
		Complete bool
		Stats    map[hourly.Quantity]hourly.Stats
		Rain     float64
		Result   *hourly.Result
		Flags    []string
	}{r.Complete, r.Stats, r.Rain, r.Result, r.Flags})
	return string(b)
}

// records collects the hourly records a gateway publishes over MQTT.
type records struct {
	mu        sync.Mutex
	byRev     map[string]string        // station/start/revision -> content
	first     map[string]hourly.Record // revision 0 of each hour
	final     map[string]hourly.Record
	n         int
	conflicts int // one revision published twice with different content
}

func watchRecords(t *testing.T, url string) *records {
	t.Helper()
	rl := &records{byRev: map[string]string{}, first: map[string]hourly.Record{}, final: map[string]hourly.Record{}}
	c, err := mqtt.Dial(context.Background(), mqtt.Options{URL: url, ClientID: "faults-records", CleanSession: false})
	require.NoError(t, err)
	t.Cleanup(func() { c.Close(time.Second) })
	require.NoError(t, c.Subscribe(pipeline.DefaultTopicPrefix+"/+/+/hour", 1, func(m mqtt.Message) {
		defer m.Ack()
		rec, err := pipeline.UnmarshalRecord(m.Payload)
		if err != nil {
			t.Errorf("undecodable record on %s: %v", m.Topic, err)
			return
		}
		k, c := fmt.Sprintf("%s/%d", hourKey(rec), rec.Revision), content(rec)
		rl.mu.Lock()
		defer rl.mu.Unlock()
		rl.n++
		if old, ok := rl.byRev[k]; ok && old != c {
			rl.conflicts++
		}
		rl.byRev[k] = c
		if rec.Revision == 0 {
			rl.first[hourKey(rec)] = rec
		}
		if f, ok := rl.final[hourKey(rec)]; !ok || rec.Revision >= f.Revision {
			rl.final[hourKey(rec)] = rec
		}
	}))
	return rl
}

// await waits until the gateway has published want hours and nothing more
// arrived for quiet, or the deadline passes; it returns the hours seen.
func (rl *records) await(want int, quiet, limit time.Duration) int {
	deadline := time.Now().Add(limit)
	last, since := -1, time.Now()
	for time.Now().Before(deadline) {
		rl.mu.Lock()
		n, hours := rl.n, len(rl.final)
		rl.mu.Unlock()
		if n != last {
			last, since = n, time.Now()
		}
		if hours >= want && time.Since(since) >= quiet {
			return hours
		}
		time.Sleep(20 * time.Millisecond)
	}
	rl.mu.Lock()
	defer rl.mu.Unlock()
	return len(rl.final)
}

func (rl *records) snapshot() (final map[string]hourly.Record, conflicts int) {
	rl.mu.Lock()
	defer rl.mu.Unlock()
	final = make(map[string]hourly.Record, len(rl.final))
	for k, v := range rl.final {
		final[k] = v
	}
	return final, rl.conflicts
}

// premature counts the hours whose first publication (revision 0) differs
// from the reference's final record: an hour closed before its readings
// arrived, which automations acting on revision 0 took as the truth.
func (rl *records) premature(ref map[string]hourly.Record) (n int, detail []string) {
	rl.mu.Lock()
	defer rl.mu.Unlock()
	for k, r := range ref {
		if f, ok := rl.first[k]; ok && content(f) != content(r) {
			n++
			detail = append(detail, k+" revision 0 closed early")
		}
	}
	return n, detail
}

// compareRecords counts the reference hours that are missing or whose latest
// revision differs (lost), and the hours the reference does not have
// (phantom).
func compareRecords(ref, got map[string]hourly.Record) (lost, phantom int, detail []string) {
	for k, r := range ref {
		g, ok := got[k]
		switch {
		case !ok:
			lost++
			detail = append(detail, k+" missing")
		case content(g) != content(r):
			lost++
			detail = append(detail, k+" differs")
		}
	}
	for k := range got {
		if _, ok := ref[k]; !ok {
			phantom++
			detail = append(detail, k+" phantom")
		}
	}
	return lost, phantom, detail
}

// publisher publishes the script's messages at QoS 1 with a persistent
// session, waiting for the broker's acknowledgement of each batch.
type publisher struct {
	c paho.Client
}

func newPublisher(t *testing.T, url, id string) *publisher {
	t.Helper()
	c := paho.NewClient(paho.NewClientOptions().AddBroker(url).SetClientID(id).SetCleanSession(true).
		SetMaxResumePubInFlight(1000).SetConnectRetry(true).SetAutoReconnect(true))
	tok := c.Connect()
	require.True(t, tok.WaitTimeout(10*time.Second), "publisher connect")
	require.NoError(t, tok.Error())
	t.Cleanup(func() { c.Disconnect(100) })
	return &publisher{c: c}
}

func (p *publisher) publish(t *testing.T, msgs []demo.Message) {
	t.Helper()
	toks := make([]paho.Token, 0, len(msgs))
	for _, m := range msgs {
		toks = append(toks, p.c.Publish(m.Topic, 1, false, m.Payload))
	}
	for _, tk := range toks {
		require.True(t, tk.WaitTimeout(60*time.Second), "publish not acknowledged by the broker")
		require.NoError(t, tk.Error())
	}
}

func (p *publisher) raw(t *testing.T, topic string, payload []byte) {
	t.Helper()
	tk := p.c.Publish(topic, 1, false, payload)
	require.True(t, tk.WaitTimeout(30*time.Second), "publish not acknowledged by the broker")
	require.NoError(t, tk.Error())
}
