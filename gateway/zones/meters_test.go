package zones

import (
	"context"
	"fmt"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/internal/testenv"
)

func TestDecodeMeter(t *testing.T) {
	v, flow, err := DecodeMeter([]byte(`{"flow_l_min": 42.5}`), 0)
	require.NoError(t, err)
	assert.True(t, flow)
	assert.Equal(t, 42.5, v)
	v, flow, err = DecodeMeter([]byte(`{"pulses": 120}`), 10)
	require.NoError(t, err)
	assert.False(t, flow)
	assert.Equal(t, 1200.0, v)
	for payload, want := range map[string]string{
		`{"pulses": 120}`:                 "no litres_per_pulse",
		`{"flow_l_min": 1, "total_l": 2}`: "exactly one of",
		`{}`:                              "exactly one of",
		`{"flow_l_min": -1}`:              ">= 0",
		`{"flow": 3}`:                     `unknown field "flow"`,
		`not json`:                        "want {",
	} {
		_, _, err := DecodeMeter([]byte(payload), 0)
		require.Error(t, err, payload)
		assert.Contains(t, err.Error(), want, payload)
	}
}

// flowScenario is one run of row-a (100 L/min: 6 mm/h on 1,000 m2) with
// a simulated meter reading every 15 s of the gateway's clock what the
// valve passes, spoiled by fault.
type flowScenario struct {
	name string
	// fault returns the meter's reading given whether the valve is open
	// (the ledger says started) and whether the run has ended.
	fault func(open, ended bool) float64
	kind  string // the alert text's mark
	delay time.Duration
	stop  bool // the run is stopped by the gateway
}

// TestFlowMeterScenariosMosquitto: through the real broker, with the
// simulated valve controller and a simulated meter on row-a's pipe, a
// leak (140 % of the zone's flow), a clog (50 %) and a valve stuck open
// after its run (100 % with no valve commanded) each raise their alert
// once the condition has lasted its configured delay (high 2 min, low
// 5 min, no-valve 5 min, readings every 15 s); the leak stops the run
// (stop_on_high). Each subtest logs the latency from the first faulty
// reading to the alert, in the gateway's clock.
func TestFlowMeterScenariosMosquitto(t *testing.T) {
	url := testenv.MQTT(t)
	for _, sc := range []flowScenario{
		{name: "leak", kind: "above the expected", delay: 2 * time.Minute, stop: true,
			fault: func(open, ended bool) float64 { return map[bool]float64{true: 140}[open] }},
		{name: "clog", kind: "below the expected", delay: 5 * time.Minute,
			fault: func(open, ended bool) float64 { return map[bool]float64{true: 50}[open] }},
		{name: "stuck-open", kind: "no valve commanded open", delay: 5 * time.Minute,
			fault: func(open, ended bool) float64 { return map[bool]float64{true: 100}[open || ended] }},
	} {
		t.Run(sc.name, func(t *testing.T) { runFlowScenario(t, url, sc) })
	}
}

func runFlowScenario(t *testing.T, url string, sc flowScenario) {
	clock := fastClock{base: time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc), real0: time.Now(), ahead: new(atomic.Int64)}
	cfg := testConfig(t, "row-a")
	cfg.Sites[0].Zones[0].System.MaxMinutes = 15
	cfg.Sites[0].Meters = []config.Meter{{ID: "m1", Zone: "row-a", StopOnHigh: true}}
	gw := dial(t, url, uniq("zones-flow-gw"))
	f := newFixture(t, cfg, gw, clock.Now())
	f.svc.o.Clock = clock
	prefix := uniq("zflow")
	f.svc.o.TopicPrefix = prefix
	ref := f.svc.zones["fernhill/row-a"]
	ref.cmdTopic, ref.reportTopic = prefix+"/fernhill/zones/row-a/command", prefix+"/fernhill/zones/row-a/report"
	mr := f.svc.meters["fernhill"][0]
	mr.topic = config.MeterTopic(prefix, "fernhill", "m1")
	require.Equal(t, 100.0, ref.z.Flow())
	f.hour(t, record(time.Date(2026, 7, 1, 9, 0, 0, 0, fernLoc), 0.5, 0))

	sim := &ValveSimulator{MQTT: dial(t, url, uniq("zones-flow-valves")), Clock: clock.Now, After: clock.After}
	require.NoError(t, sim.Serve(map[string]string{ref.cmdTopic: ref.reportTopic}))

	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- f.svc.Run(ctx) }()
	defer func() {
		cancel()
		require.NoError(t, <-done)
	}()

	// The meter: every 15 s of the gateway's clock (0.25 s real), the
	// reading of the valve as the ledger stands, spoiled by the fault.
	var onset atomic.Int64 // gateway time of the first faulty reading, unix ns
	meterDone := make(chan struct{})
	meter := dial(t, url, uniq("zones-flow-meter"))
	go func() {
		defer close(meterDone)
		for ctx.Err() == nil {
			open, ended := false, false
			if led, err := f.svc.Ledger("fernhill"); err == nil && len(led) > 0 {
				open = led[0].State == controllers.Started
				ended = !led[0].EndedAt.IsZero()
			}
			v := sc.fault(open, ended)
			normal := 0.0
			if open {
				normal = 100
			}
			now := clock.Now()
			if v != normal {
				onset.CompareAndSwap(0, now.UnixNano())
			}
			pctx, pcancel := context.WithTimeout(ctx, 5*time.Second)
			_ = meter.Publish(pctx, mr.topic, 1, false, fmt.Appendf(nil, `{"flow_l_min": %g}`, v))
			pcancel()
			select {
			case <-ctx.Done():
			case <-time.After(250 * time.Millisecond):
			}
		}
	}()
	defer func() { cancel(); <-meterDone }()

	var raised Event
	require.Eventually(t, func() bool {
		for _, e := range f.eventsOf(EventAlert) {
			if strings.Contains(e.Text, sc.kind) {
				raised = e
				return true
			}
		}
		return false
	}, 60*time.Second, 20*time.Millisecond)
	require.NotZero(t, onset.Load())
	latency := raised.Time.Sub(time.Unix(0, onset.Load()))
	t.Logf("%s: alert %v after the first faulty reading (delay %v): %s", sc.name, latency.Round(time.Second), sc.delay, raised.Text)
	assert.GreaterOrEqual(t, latency, sc.delay-15*time.Second, "not before the delay")
	assert.LessOrEqual(t, latency, sc.delay+90*time.Second, "within the delay, a reading's interval and a scheduling pass")

	led, err := f.svc.Ledger("fernhill")
	require.NoError(t, err)
	require.Len(t, led, 1)
	if sc.stop {
		require.Eventually(t, func() bool {
			led, err := f.svc.Ledger("fernhill")
			return err == nil && led[0].State == controllers.Stopped
		}, 20*time.Second, 20*time.Millisecond)
		led, _ = f.svc.Ledger("fernhill")
		assert.True(t, strings.HasPrefix(led[0].StopReason, controllers.FlowStopPrefix), led[0].StopReason)
		assert.Equal(t, 1, sim.Stops(led[0].ID))
		assert.Less(t, led[0].MinutesRun, 15.0)
	} else {
		assert.Zero(t, sim.Stops(led[0].ID), "only a high flow stops a run")
	}
}
