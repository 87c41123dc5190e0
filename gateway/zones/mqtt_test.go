package zones

import (
	"bufio"
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
)

// speed is how much faster than real time the gateway's clock runs in the
// broker tests: one real second is one minute.
const speed = 60

// fastClock runs at speed x real time from base (x times when x is set),
// plus the jumps reach made (ahead, when set).
type fastClock struct {
	base, real0 time.Time
	x           time.Duration
	ahead       *atomic.Int64
}

func (c fastClock) rate() time.Duration {
	if c.x > 0 {
		return c.x
	}
	return speed
}

func (c fastClock) Now() time.Time {
	t := c.base.Add(time.Since(c.real0) * c.rate())
	if c.ahead != nil {
		t = t.Add(time.Duration(c.ahead.Load()))
	}
	return t
}

func (c fastClock) After(d time.Duration) <-chan time.Time { return time.After(d / c.rate()) }

// reach moves the clock forward to t when it is behind (ahead must be set):
// the time a simulated valve run takes passes at once.
func (c fastClock) reach(t time.Time) {
	if d := t.Sub(c.Now()); d > 0 {
		c.ahead.Add(int64(d))
	}
}

func dial(t *testing.T, url, id string) *mqtt.Client {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	c, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: id})
	require.NoError(t, err)
	t.Cleanup(func() { c.Close(time.Second) })
	return c
}

func uniq(prefix string) string {
	return fmt.Sprintf("%s-%d-%d", prefix, os.Getpid(), time.Now().UnixNano()%1e9)
}

// TestValveRoundTripMosquitto runs the scheduler against a simulated valve
// controller through the real broker: a duplicate report (credited once), a
// failure (its minutes credited, no second run), a controller that never
// answers (three attempts, expired, never credited).
func TestValveRoundTripMosquitto(t *testing.T) {
	url := testenv.MQTT(t)
	// One real second is ten minutes: the valves report paced, and row-a's
	// 240-minute run takes 24 s (a run reported before it can have ended is
	// refused).
	clock := fastClock{base: time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc), real0: time.Now(), x: 600}
	cfg := testConfig(t)
	gw := dial(t, url, uniq("zones-gw"))
	f := newFixture(t, cfg, gw, clock.Now())
	f.svc.o.Clock = clock
	f.hour(t, record(time.Date(2026, 7, 1, 9, 0, 0, 0, fernLoc), 0.5, 0)) // 30.5 mm everywhere

	sim := &ValveSimulator{MQTT: dial(t, url, uniq("zones-valves")), Clock: clock.Now, After: clock.After, Behave: func(c CommandMessage) Behaviour {
		switch c.Zone {
		case "row-a":
			return Behaviour{Duplicate: true}
		case "row-b":
			return Behaviour{Fail: true, FailAfter: 30, Reason: "pressure low"}
		}
		return Behaviour{Lose: true}
	}}
	serveAndRun(t, f, sim)

	// row-c expires 15 minutes after its 10:02 start (10:17, ~2 s real);
	// row-a finishes at 14:02 (~24 s real).
	require.Eventually(t, func() bool {
		led, err := f.svc.Ledger("fernhill")
		require.NoError(t, err)
		open := 0
		for _, c := range led {
			if c.State.Open() {
				open++
			}
		}
		return len(led) == 3 && open == 0
	}, 40*time.Second, 100*time.Millisecond)

	led, err := f.svc.Ledger("fernhill")
	require.NoError(t, err)
	byZone := map[string]controllers.Command{}
	for _, c := range led {
		byZone[c.Zone] = c
	}
	// row-a: 240 minutes x 6 mm/h x 0.9 = 21.6 mm, credited once: 30.5 - 21.6 = 8.9.
	assert.Equal(t, controllers.Finished, byZone["row-a"].State)
	assert.InDelta(t, 8.9, f.status(t, "row-a").State.Depletion, 1e-9)
	assert.Equal(t, 1, sim.Received(byZone["row-a"].ID), "answered at once: never re-sent")
	// row-b: failed after 30 minutes: 2.7 mm.
	assert.Equal(t, controllers.Failed, byZone["row-b"].State)
	assert.InDelta(t, 27.8, f.status(t, "row-b").State.Depletion, 1e-9)
	// row-c: three attempts, expired, nothing credited.
	assert.Equal(t, controllers.Expired, byZone["row-c"].State)
	assert.Equal(t, 3, sim.Received(byZone["row-c"].ID))
	assert.Equal(t, 3, byZone["row-c"].Attempts)
	assert.InDelta(t, 30.5, f.status(t, "row-c").State.Depletion, 1e-9)
	assert.Len(t, f.eventsOf(EventCredited), 2)
	assert.Len(t, sim.Runs(), 3, "no second run for any zone in this window")

	// A hold request over MQTT is applied and answered on the reply topic.
	replies := make(chan []byte, 1)
	require.NoError(t, sim.MQTT.Subscribe("etpulse/fernhill/hold/reply", 1, func(m mqtt.Message) { replies <- m.Payload; m.Ack() }))
	pctx, pcancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer pcancel()
	require.NoError(t, sim.MQTT.Publish(pctx, "etpulse/fernhill/hold", 1, false, []byte(`{"id":"req-7","zone":"row-a","action":"rain_delay","hours":12}`)))
	select {
	case b := <-replies:
		assert.Contains(t, string(b), `"id":"req-7","ok":true,"zone":"row-a","action":"rain_delay","until":"2026-07-02T`)
	case <-time.After(10 * time.Second):
		t.Fatal("no hold reply")
	}
}

// TestHelperGateway is not a test: it is the gateway process that
// TestKillBetweenCommandAndReport starts, kills with SIGKILL and restarts.
func TestHelperGateway(t *testing.T) {
	if os.Getenv("ETPULSE_ZONES_HELPER") != "1" {
		t.Skip("helper process only")
	}
	base, _ := strconv.ParseInt(os.Getenv("ETPULSE_ZONES_BASE"), 10, 64)
	real0, _ := strconv.ParseInt(os.Getenv("ETPULSE_ZONES_REAL0"), 10, 64)
	clock := fastClock{base: time.Unix(0, base), real0: time.Unix(0, real0)}
	db, err := state.Open(os.Getenv("ETPULSE_ZONES_DB"))
	require.NoError(t, err)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	gw, err := mqtt.Dial(ctx, mqtt.Options{URL: os.Getenv("ETPULSE_ZONES_MQTT"), ClientID: os.Getenv("ETPULSE_ZONES_CLIENT")})
	cancel()
	require.NoError(t, err)
	var mu sync.Mutex
	say := func(format string, args ...any) {
		mu.Lock()
		defer mu.Unlock()
		fmt.Printf(format+"\n", args...)
	}
	svc, err := New(Options{Config: testConfig(t, "row-k"), DB: db, MQTT: gw, Clock: clock,
		OnEvent: func(e Event) {
			if e.Command != nil {
				say("EVENT %s %s %d", e.Kind, e.Command.ID, e.Command.Attempts)
			}
		}})
	require.NoError(t, err)
	// The first run gives the zone one valid hour (30.5 mm).
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
		if b, _ := openBuckets(tx); b.state.Get(key("fernhill", "row-k")) != nil {
			return nil
		}
		return svc.HandleHour(tx, record(time.Date(2026, 7, 1, 9, 0, 0, 0, fernLoc), 0.5, 0))
	}))
	say("READY")
	require.NoError(t, svc.Run(context.Background()))
}

type helper struct {
	cmd   *exec.Cmd
	lines chan string
}

func startHelper(t *testing.T, env []string) *helper {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^TestHelperGateway$", "-test.count=1")
	cmd.Env = append(os.Environ(), env...)
	out, err := cmd.StdoutPipe()
	require.NoError(t, err)
	cmd.Stderr = os.Stderr
	require.NoError(t, cmd.Start())
	h := &helper{cmd: cmd, lines: make(chan string, 100)}
	go func() {
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			h.lines <- sc.Text()
		}
		close(h.lines)
	}()
	t.Cleanup(func() { h.kill() })
	h.await(t, "READY")
	return h
}

// await waits for a line starting with prefix and returns it.
func (h *helper) await(t *testing.T, prefix string) string {
	t.Helper()
	timeout := time.After(30 * time.Second)
	for {
		select {
		case l, ok := <-h.lines:
			if !ok {
				t.Fatalf("helper exited waiting for %q", prefix)
			}
			if strings.HasPrefix(l, prefix) {
				return l
			}
		case <-timeout:
			t.Fatalf("helper: no %q", prefix)
		}
	}
}

// kill sends SIGKILL to the helper (by its PID) and reaps it.
func (h *helper) kill() {
	if h.cmd.ProcessState != nil {
		return
	}
	_ = syscall.Kill(h.cmd.Process.Pid, syscall.SIGKILL)
	_ = h.cmd.Wait()
}

// TestKillBetweenCommandAndReport kills the gateway with SIGKILL after its
// command reached the valve and before the valve reported, lets the valve
// report while the gateway is down, restarts it: the queued reports are
// credited once and the command is not sent again. A second SIGKILL and a
// repeated report afterwards change nothing.
func TestKillBetweenCommandAndReport(t *testing.T) {
	url := testenv.MQTT(t)
	dbPath := filepath.Join(t.TempDir(), "state.db")
	real0 := time.Now()
	env := []string{
		"ETPULSE_ZONES_HELPER=1", "ETPULSE_ZONES_DB=" + dbPath, "ETPULSE_ZONES_MQTT=" + url,
		"ETPULSE_ZONES_CLIENT=" + uniq("zones-kill-gw"),
		"ETPULSE_ZONES_BASE=" + strconv.FormatInt(time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc).UnixNano(), 10),
		"ETPULSE_ZONES_REAL0=" + strconv.FormatInt(real0.UnixNano(), 10),
	}
	// The valve reports its whole run at once (while the gateway is down);
	// the gateway comes back four hours later, after the 240-minute run
	// could have ended (a report of a run longer than the time since its
	// start is refused).
	later := append([]string{}, env...)
	later[len(later)-2] = "ETPULSE_ZONES_BASE=" + strconv.FormatInt(time.Date(2026, 7, 1, 14, 0, 30, 0, fernLoc).UnixNano(), 10)
	release := make(chan struct{})
	reached := make(chan CommandMessage, 1)
	sim := &ValveSimulator{MQTT: dial(t, url, uniq("zones-kill-valves")), Behave: func(c CommandMessage) Behaviour {
		return Behaviour{Hold: func(c CommandMessage) <-chan struct{} { reached <- c; return release }}
	}}
	const cmdTopic, reportTopic = "etpulse/fernhill/zones/row-k/command", "etpulse/fernhill/zones/row-k/report"
	require.NoError(t, sim.Serve(map[string]string{cmdTopic: reportTopic}))

	a := startHelper(t, env)
	var cmd CommandMessage
	select {
	case cmd = <-reached:
	case <-time.After(30 * time.Second):
		t.Fatal("no command reached the valve")
	}
	a.await(t, "EVENT sent "+cmd.ID+" 1")
	a.kill() // SIGKILL between the command and its report
	close(release)
	// The reports reach the broker while the gateway is down, for longer
	// than the ack timeout (2 min = 2 s real): at restart the command is due
	// for a retry, but the queued reports must win.
	time.Sleep(3 * time.Second)

	b := startHelper(t, later)
	b.await(t, "EVENT credited "+cmd.ID)
	// Past the retry window (ack timeout 2 min = 2 s real): nothing re-sent.
	time.Sleep(3 * time.Second)
	b.kill()
	assert.Equal(t, 1, sim.Received(cmd.ID), "the command was not sent again after the restart")

	// Restart once more and repeat the finished report: a duplicate.
	c := startHelper(t, later)
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	require.NoError(t, sim.Republish(ctx, reportTopic, cmd.ID))
	c.await(t, "EVENT report "+cmd.ID)
	time.Sleep(time.Second)
	c.kill()

	db, err := state.Open(dbPath)
	require.NoError(t, err)
	defer db.Close()
	require.NoError(t, db.View(func(tx *bbolt.Tx) error {
		bk, err := openBuckets(tx)
		require.NoError(t, err)
		led, err := loadLedger(bk, "fernhill")
		require.NoError(t, err)
		require.Len(t, led, 1, "one command in all three runs")
		assert.Equal(t, controllers.Finished, led[0].State)
		assert.Equal(t, 1, led[0].Attempts)
		var zb state.ZoneBalance
		_, err = getJSON(bk.state, key("fernhill", "row-k"), &zb)
		require.NoError(t, err)
		// 30.5 - 240/60 x 6 x 0.9 = 30.5 - 21.6 = 8.9 mm: credited exactly once.
		assert.InDelta(t, 8.9, zb.DepletionMM, 1e-9)
		return nil
	}))
	assert.Equal(t, 1, sim.Received(cmd.ID))
	assert.Len(t, sim.Runs(), 1)
}

// TestSilentControllerGetsStops: a controller that goes silent after its
// started report (rebooted, hung) with the valve open is sent stops from
// the run's latest possible end on, repeated until it answers; the water
// it reports is credited once and the run is stopped, never re-sent.
func TestSilentControllerGetsStops(t *testing.T) {
	url := testenv.MQTT(t)
	clock := fastClock{base: time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc), real0: time.Now()}
	cfg := testConfig(t, "row-a")
	cfg.Sites[0].Zones[0].System.MaxMinutes = 10
	cfg.Sites[0].Zones[0].Commands.FinishGrace = config.Duration(time.Minute)
	gw := dial(t, url, uniq("zones-gw"))
	f := newFixture(t, cfg, gw, clock.Now())
	f.svc.o.Clock = clock
	f.hour(t, record(time.Date(2026, 7, 1, 9, 0, 0, 0, fernLoc), 0.5, 0))

	sim := &ValveSimulator{MQTT: dial(t, url, uniq("zones-valves")), Clock: clock.Now, After: clock.After,
		Behave: func(CommandMessage) Behaviour { return Behaviour{SilentAfterStart: true, AnswerStop: 3} }}
	serveAndRun(t, f, sim)

	// Start 10:02, 10 minutes, finish grace 1: stops from 10:13 (one real
	// second is one simulated minute), 2 minutes apart: the third (10:17)
	// is heard.
	var cmd controllers.Command
	require.Eventually(t, func() bool {
		led, err := f.svc.Ledger("fernhill")
		require.NoError(t, err)
		if len(led) != 1 {
			return false
		}
		cmd = led[0]
		return cmd.State == controllers.Stopped
	}, 40*time.Second, 100*time.Millisecond, "ledger: %+v", &cmd)
	assert.Equal(t, 3, sim.Stops(cmd.ID))
	assert.Equal(t, 1, sim.Received(cmd.ID), "the run itself was never sent again")
	assert.Equal(t, 3, cmd.StopAttempts)
	assert.Contains(t, cmd.StopReason, "latest possible end")
	// Open from 10:02 until about 10:17: ~15 minutes reported for a
	// 10-minute command, credited up to the 10 % over-run margin:
	// 11 min x 6 mm/h x 0.9.
	assert.Greater(t, cmd.MinutesRun, 13.0)
	credit := 30.5 - f.status(t, "row-a").State.Depletion
	assert.InDelta(t, controllers.NetMM(11, 6, 0.9), credit, 1e-9, "capped at the commanded water plus the margin")
	assert.Contains(t, cmd.Note, "overrun")
	assert.GreaterOrEqual(t, len(f.eventsOf(EventStop)), 3)
}

// serveAndRun lets sim answer every zone of f and runs f's scheduler loop
// until the test ends.
func serveAndRun(t *testing.T, f *fixture, sim *ValveSimulator) {
	t.Helper()
	topics := map[string]string{}
	for _, ref := range f.svc.zones {
		topics[ref.cmdTopic] = ref.reportTopic
	}
	require.NoError(t, sim.Serve(topics))
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- f.svc.Run(ctx) }()
	t.Cleanup(func() {
		cancel()
		require.NoError(t, <-done)
	})
}
