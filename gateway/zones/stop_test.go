package zones

import (
	"context"
	"encoding/json"
	"sync"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/alert"
	gwclock "etpulse/gateway/clock"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/quality"
	"etpulse/gateway/store"
)

// TestHoldStopsRunningValveMosquitto: through the real broker, a manual
// hold arrives while row-a's valve runs; the gateway publishes a stop on the
// command topic, the simulated controller closes the valve and reports
// stopped with the minutes it ran, and exactly those minutes are credited,
// once. The command is never sent again, and neither is the stop.
func TestHoldStopsRunningValveMosquitto(t *testing.T) {
	url := testenv.MQTT(t)
	clock := fastClock{base: time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc), real0: time.Now()}
	cfg := testConfig(t, "row-a")
	gw := dial(t, url, uniq("zones-stop-gw"))
	f := newFixture(t, cfg, gw, clock.Now())
	f.svc.o.Clock = clock
	prefix := uniq("zstop")
	f.svc.o.TopicPrefix = prefix
	ref := f.svc.zones["fernhill/row-a"]
	ref.cmdTopic, ref.reportTopic = prefix+"/fernhill/zones/row-a/command", prefix+"/fernhill/zones/row-a/report"
	f.hour(t, record(time.Date(2026, 7, 1, 9, 0, 0, 0, fernLoc), 0.5, 0)) // 30.5 mm

	// The valve runs in the gateway's clock: started at 10:02, 240 minutes.
	sim := &ValveSimulator{MQTT: dial(t, url, uniq("zones-stop-valves")), Clock: clock.Now, After: clock.After}
	require.NoError(t, sim.Serve(map[string]string{ref.cmdTopic: ref.reportTopic}))
	// Everything on the command topic, as a controller sees it.
	var mu sync.Mutex
	var onCommand []string
	require.NoError(t, dial(t, url, uniq("zones-stop-watch")).Subscribe(ref.cmdTopic, 1, func(m mqtt.Message) {
		mu.Lock()
		onCommand = append(onCommand, string(m.Payload))
		mu.Unlock()
		m.Ack()
	}))

	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- f.svc.Run(ctx) }()
	defer func() {
		cancel()
		require.NoError(t, <-done)
	}()

	command := func() controllers.Command {
		led, err := f.svc.Ledger("fernhill")
		require.NoError(t, err)
		require.Len(t, led, 1)
		return led[0]
	}
	require.Eventually(t, func() bool {
		led, err := f.svc.Ledger("fernhill")
		return err == nil && len(led) == 1 && led[0].State == controllers.Started
	}, 20*time.Second, 20*time.Millisecond)
	time.Sleep(3 * time.Second) // about 3 minutes of water

	replies := make(chan []byte, 1)
	require.NoError(t, sim.MQTT.Subscribe(prefix+"/fernhill/hold/reply", 1, func(m mqtt.Message) { replies <- m.Payload; m.Ack() }))
	pctx, pcancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer pcancel()
	require.NoError(t, sim.MQTT.Publish(pctx, prefix+"/fernhill/hold", 1, false, []byte(`{"id":"req-9","action":"hold","reason":"mainline burst"}`)))
	select {
	case b := <-replies:
		assert.Contains(t, string(b), `"id":"req-9","ok":true`)
	case <-time.After(10 * time.Second):
		t.Fatal("no hold reply")
	}

	require.Eventually(t, func() bool { return command().State == controllers.Stopped }, 20*time.Second, 20*time.Millisecond)
	c := command()
	assert.Equal(t, 1, sim.Stops(c.ID))
	assert.Equal(t, 1, c.StopAttempts)
	assert.Equal(t, "mainline burst", c.StopReason)
	assert.True(t, c.RunKnown)
	assert.Greater(t, c.MinutesRun, 1.0)
	assert.Less(t, c.MinutesRun, 60.0)
	// Credit = minutes_run / 60 x 6 mm/h x 0.9 (README "Reports"), once.
	assert.InDelta(t, c.MinutesRun/60*6*0.9, c.CreditMM, 1e-9)
	assert.InDelta(t, 30.5-c.CreditMM, f.status(t, "row-a").State.Depletion, 1e-9)
	assert.Len(t, f.eventsOf(EventCredited), 1)
	assert.Len(t, f.eventsOf(EventStop), 1)

	// Past the ack timeout (2 min = 2 s real) nothing more is published:
	// one command, one stop.
	time.Sleep(3 * time.Second)
	assert.Equal(t, 1, sim.Received(c.ID), "the command was never re-sent")
	assert.Equal(t, 1, sim.Stops(c.ID))
	assert.Len(t, sim.Runs(), 1)
	mu.Lock()
	defer mu.Unlock()
	require.Len(t, onCommand, 2)
	stop, err := DecodeValveMessage([]byte(onCommand[1]))
	require.NoError(t, err)
	require.NotNil(t, stop.Stop)
	assert.Equal(t, StopMessage{ID: c.ID, Zone: "row-a", Valve: "row-a", Action: "stop", Cause: "mainline burst", Attempt: 1}, *stop.Stop)
	assert.NotContains(t, onCommand[0], `"action"`, "run commands keep their format")
}

// stopFixture is row-a with a command sent at 10:01 for 10:02, and a
// monitor receiving the zone alerts (no broker).
func stopFixture(t *testing.T) (*fixture, *quality.Monitor, controllers.Command, time.Time) {
	t.Helper()
	start := time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc)
	cfg := testConfig(t, "row-a")
	f := newFixture(t, cfg, nil, start)
	mon := monitorFor(t, f, cfg, nil, gwclock.Func(f.clock.Now))
	f.hour(t, record(start.Add(-90*time.Second).Truncate(time.Hour), 0.5, 0))
	_, _, err := f.svc.tick(start)
	require.NoError(t, err)
	now := start.Add(30 * time.Second) // 10:01: the send lead before 10:02
	_, sends, err := f.svc.tick(now)
	require.NoError(t, err)
	require.Len(t, sends, 1)
	require.False(t, sends[0].stop)
	return f, mon, sends[0].cmd, now
}

// TestStopRepeatedThenAlerted: a controller that ignores stops gets the
// stop two minutes apart for the usual three attempts (DefaultPolicy), then
// less often, for as long as it is silent, never the command again; from the
// fourth stop a critical valve-open alert says the valve may still be open.
// A late stopped report is credited once and clears the alert.
func TestStopRepeatedThenAlerted(t *testing.T) {
	f, mon, cmd, now := stopFixture(t)
	site := f.svc.sites[0]
	r := f.svc.applyHold(site, []byte(`{"id":"h1","zone":"row-a","action":"rain_delay","hours":12}`), now.Add(10*time.Second))
	require.True(t, r.OK, r.Error)

	var stops []outgoing
	var runs int
	for tt := now.Add(10 * time.Second); tt.Before(now.Add(30 * time.Minute)); tt = tt.Add(15 * time.Second) {
		_, sends, err := f.svc.tick(tt)
		require.NoError(t, err)
		for _, o := range sends {
			if o.stop {
				stops = append(stops, o)
			} else if o.cmd.ID == cmd.ID {
				runs++
			}
		}
	}
	assert.Zero(t, runs, "the held command is never re-sent")
	// 0, 2, 4, 8, 16 minutes: five stops in 30 minutes.
	require.Len(t, stops, 5)
	for i, o := range stops {
		var m map[string]any
		require.NoError(t, json.Unmarshal(o.payload, &m))
		assert.Equal(t, map[string]any{"id": cmd.ID, "zone": "row-a", "valve": "row-a", "action": "stop",
			"cause": "rain delay 12 h", "attempt": float64(i + 1)}, m)
		assert.Equal(t, "etpulse/fernhill/zones/row-a/command", o.topic)
	}
	assert.Equal(t, 2*time.Minute, stops[1].cmd.StopSentAt.Sub(stops[0].cmd.StopSentAt))

	led, err := f.svc.Ledger("fernhill")
	require.NoError(t, err)
	require.Len(t, led, 1, "held: nothing new planned")
	assert.True(t, led[0].Stopping(), "still waiting for the controller")
	active := mon.Active()
	require.Len(t, active, 1)
	assert.Equal(t, alert.ZoneKey("fernhill", "row-a", alert.KindValveOpen), active[0].Key)
	assert.Contains(t, active[0].Message, "the valve may still be open")
	assert.Equal(t, alert.SeverityCritical, active[0].Severity)

	// The controller comes back and reports: 4.5 minutes ran.
	late := f.clock.Now().Add(time.Hour)
	require.NoError(t, f.svc.applyReport(f.svc.zones["fernhill/row-a"],
		controllers.Report{ID: cmd.ID, State: controllers.ReportStopped, MinutesRun: 4.5, HasMinutes: true}, late))
	require.NoError(t, f.svc.applyReport(f.svc.zones["fernhill/row-a"],
		controllers.Report{ID: cmd.ID, State: controllers.ReportStopped, MinutesRun: 4.5, HasMinutes: true}, late))
	// 4.5/60 x 6 x 0.9 = 0.405 mm, once.
	assert.InDelta(t, 30.5-0.405, f.status(t, "row-a").State.Depletion, 1e-9)
	assert.Empty(t, mon.Active(), "a final report clears valve-open")
	assert.Equal(t, 1.0, metricValue(t, f.reg, "etpulse_commands_total", map[string]string{"outcome": "stop_sent"}))
	assert.Equal(t, 4.0, metricValue(t, f.reg, "etpulse_commands_total", map[string]string{"outcome": "stop_resent"}))
	assert.Equal(t, 1.0, metricValue(t, f.reg, "etpulse_commands_total", map[string]string{"outcome": "stopped"}))
	assert.Equal(t, 1.0, metricValue(t, f.reg, "etpulse_commands_total", map[string]string{"outcome": "duplicate"}))
}

// TestHoldRaceStopsResend: a hold stored while a sent command waits for its
// first report; a later tick must stop it, not re-send it, even when the
// hold came by a path that did not ask for the stop itself.
func TestHoldRaceStopsResend(t *testing.T) {
	f, _, cmd, now := stopFixture(t)
	// Store the hold directly (as if written before this command was sent).
	require.NoError(t, f.db.Update(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		return putJSON(b.holds, key("fernhill", "row-a"), holdRecord{Forever: true, Reason: "valve service"})
	}))
	_, sends, err := f.svc.tick(now.Add(2 * time.Minute)) // the retry would be due now
	require.NoError(t, err)
	require.Len(t, sends, 1)
	assert.True(t, sends[0].stop)
	assert.Equal(t, cmd.ID, sends[0].cmd.ID)
	assert.Equal(t, 1, sends[0].cmd.Attempts, "not re-sent")
	assert.Equal(t, "valve service", sends[0].cmd.StopReason)
}

// TestValveFailedAlertLifecycle: a failed run raises valve-failed with the
// controller's reason; the next finished run of the zone clears it. Stale
// ET raises and clears zone-et-stale through the monitor too.
func TestValveFailedAlertLifecycle(t *testing.T) {
	f, mon, cmd, now := stopFixture(t)
	ref := f.svc.zones["fernhill/row-a"]
	require.NoError(t, f.svc.applyReport(ref, controllers.Report{ID: cmd.ID, State: controllers.ReportFailed,
		MinutesRun: 12, HasMinutes: true, Reason: "pressure low"}, now.Add(13*time.Minute)))
	active := mon.Active()
	require.Len(t, active, 1)
	assert.Equal(t, alert.KindValveFailed, active[0].Kind)
	assert.Equal(t, "command "+cmd.ID+" failed after 12.0 of 240 min: pressure low", active[0].Message)
	assert.Equal(t, 12.0, active[0].Value)
	assert.Equal(t, 240.0, active[0].Limit)

	// The next day's run finishes: cleared.
	next := controllers.Command{ID: "row-a-next", Zone: "row-a", Valve: "row-a", Minutes: 60,
		Start: now.Add(24 * time.Hour), Expiry: now.Add(24*time.Hour + 15*time.Minute), Cycle: 1, Cycles: 1,
		Rate: 6, Efficiency: 0.9, Area: 1000, State: controllers.Sent, Attempts: 1, SentAt: now.Add(24 * time.Hour)}
	require.NoError(t, f.db.Update(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		return putCommand(b, "fernhill", &next)
	}))
	require.NoError(t, f.svc.applyReport(ref, controllers.Report{ID: next.ID, State: controllers.ReportFinished,
		MinutesRun: 60, HasMinutes: true}, now.Add(25*time.Hour)))
	assert.Empty(t, mon.Active())
	assert.Equal(t, 1.0, metricValue(t, f.reg, "etpulse_alerts_cleared_total", map[string]string{"kind": "valve-failed"}))

	// No valid ET for more than 6 h: zone-et-stale (critical: the zone holds).
	late := now.Add(8 * time.Hour)
	_, _, err := f.svc.tick(late)
	require.NoError(t, err)
	active = mon.Active()
	require.Len(t, active, 1)
	assert.Equal(t, alert.ZoneKey("fernhill", "row-a", alert.KindZoneETStale), active[0].Key)
	assert.Equal(t, alert.ZoneET, active[0].Quantity)
	assert.Equal(t, alert.SeverityCritical, active[0].Severity)
	assert.Contains(t, active[0].Message, "zone holds")
	f.hour(t, record(late.Truncate(time.Hour).Add(-time.Hour), 0.1, 0))
	_, _, err = f.svc.tick(late.Add(time.Second))
	require.NoError(t, err)
	assert.Empty(t, mon.Active(), "valid ET clears it")

	// Every raise and clear is a zone_alert point of the zone.
	n := 0
	require.NoError(t, f.out.History().Range(store.Filter{Measurements: []string{store.MeasurementZoneAlert}}, func(p store.Point) error {
		n++
		assert.Equal(t, "row-a", p.Tags["zone"])
		assert.Empty(t, p.Tags["station"])
		return nil
	}))
	assert.Equal(t, 4, n)
}

// TestDecodeValveMessage: the command topic carries run commands in their
// original format (no "action", or "run") and stops ("action": "stop").
func TestDecodeValveMessage(t *testing.T) {
	run := `{"id":"east-paddock-20260714T0501Z-c1","zone":"east-paddock","valve":"v7","minutes":120,` +
		`"start":"2026-07-14T05:01:00Z","expiry":"2026-07-14T05:16:00Z","cycle":1,"cycles":3,"attempt":1,` +
		`"reason":{"depletion_mm":60.5,"trigger_mm":55.2,"etc_since_last_mm":60.5}}`
	m, err := DecodeValveMessage([]byte(run))
	require.NoError(t, err)
	require.NotNil(t, m.Run)
	assert.Nil(t, m.Stop)
	assert.Equal(t, 120, m.Run.Minutes)
	c, err := DecodeCommand([]byte(run))
	require.NoError(t, err)
	assert.Equal(t, *m.Run, c)
	m, err = DecodeValveMessage([]byte(`{"id":"x","action":"run","minutes":5}`))
	require.NoError(t, err)
	assert.Equal(t, 5, m.Run.Minutes)

	stop := `{"id":"east-paddock-20260714T0501Z-c1","zone":"east-paddock","valve":"v7","action":"stop","cause":"manual hold","attempt":2}`
	m, err = DecodeValveMessage([]byte(stop))
	require.NoError(t, err)
	require.NotNil(t, m.Stop)
	assert.Nil(t, m.Run)
	assert.Equal(t, StopMessage{ID: "east-paddock-20260714T0501Z-c1", Zone: "east-paddock", Valve: "v7", Action: "stop", Cause: "manual hold", Attempt: 2}, *m.Stop)
	_, err = DecodeCommand([]byte(stop))
	assert.Error(t, err, "a stop is never read as a run command")

	for _, bad := range []string{
		`{"id":"x","action":"pause"}`,
		`{"id":"","action":"stop"}`,
		`{"action":"stop"}`,
		`{"id":"x","action":"stop","minutes":5}`,
		`{"minutes":5}`,
		`{"id":"x","action":"stop"} {}`,
		`[]`, ``,
	} {
		_, err := DecodeValveMessage([]byte(bad))
		assert.Error(t, err, bad)
	}
}

// FuzzDecodeValveMessage: any bytes give exactly one of a run command (with
// an id) and a stop (with an id), or an error; never a panic.
func FuzzDecodeValveMessage(f *testing.F) {
	for _, s := range []string{
		`{"id":"row-a-20260701T1802Z-c1","zone":"row-a","valve":"v1","minutes":240,"start":"2026-07-01T18:02:00Z","expiry":"2026-07-01T18:17:00Z","cycle":1,"cycles":1,"attempt":1,"reason":{"depletion_mm":30.5,"trigger_mm":20,"etc_since_last_mm":0.5}}`,
		`{"id":"row-a-20260701T1802Z-c1","zone":"row-a","valve":"v1","action":"stop","cause":"manual hold","attempt":1}`,
		`{"id":"x","action":"run"}`, `{"id":"x","ACTION":"stop"}`, `{"action":7}`, `null`,
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		m, err := DecodeValveMessage(b)
		if err != nil {
			return
		}
		switch {
		case (m.Run == nil) == (m.Stop == nil):
			t.Fatalf("run %v and stop %v from %q", m.Run, m.Stop, b)
		case m.Run != nil && (m.Run.ID == "" || (m.Run.Action != "" && m.Run.Action != "run")):
			t.Fatalf("bad run command %+v from %q", *m.Run, b)
		case m.Stop != nil && (m.Stop.ID == "" || m.Stop.Action != "stop"):
			t.Fatalf("bad stop %+v from %q", *m.Stop, b)
		}
	})
}
