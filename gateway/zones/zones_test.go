package zones

import (
	"encoding/json"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/store"
	"etpulse/hourly"
)

func TestHandleHourStepsZones(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 0, 0, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, start)

	// Kc 1.0, no stress at 30 mm (RAW 65): ETc = ET. 30 + 0.5 = 30.5 mm.
	f.hour(t, record(start, 0.5, 0))
	assert.InDelta(t, 30.5, f.status(t, "row-a").State.Depletion, 1e-9)
	// A tall-reference record does not drive grass-Kc zones.
	tall := record(start.Add(time.Hour), 0.9, 0)
	tall.Reference = hourly.Tall
	f.hour(t, tall)
	assert.InDelta(t, 30.5, f.status(t, "row-a").State.Depletion, 1e-9)
	// A revision applies the difference: ET 0.5 -> 0.7, +0.2 mm.
	rev := record(start, 0.7, 0)
	rev.Revision = 1
	f.hour(t, rev)
	assert.InDelta(t, 30.7, f.status(t, "row-b").State.Depletion, 1e-9)
	// A record the balance refuses (negative rain) is logged, not fatal.
	bad := record(start.Add(2*time.Hour), 0.5, -3)
	f.hour(t, bad)
	assert.InDelta(t, 30.7, f.status(t, "row-c").State.Depletion, 1e-9)

	// The step points: one per zone and hour, the revision overwriting the
	// first emission with the hour's totals (etc 0.7).
	var pts []store.Point
	require.NoError(t, f.out.History().Range(store.Filter{Measurements: []string{store.MeasurementZone}}, func(p store.Point) error {
		pts = append(pts, p)
		return nil
	}))
	require.Len(t, pts, 3)
	assert.InDelta(t, 0.7, pts[0].Fields["etc_mm"], 1e-12)
	assert.InDelta(t, 30.7, pts[0].Fields["depletion_mm"], 1e-12)
	assert.Equal(t, int64(1), pts[0].Fields["revision"])

	assert.InDelta(t, 30.7, testutil.ToFloat64(f.svc.m.depletion.WithLabelValues("fernhill", "row-a")), 1e-9)
	assert.InDelta(t, 130, testutil.ToFloat64(f.svc.m.taw.WithLabelValues("fernhill", "row-a")), 1e-9)
	assert.Len(t, f.eventsOf(EventStep), 6)
}

// driveReport feeds a report through the service's report handler as the
// MQTT client would, and reports whether it was acknowledged.
func driveReport(f *fixture, zone string, r ReportMessage) bool {
	b, _ := json.Marshal(r)
	acked := false
	ref := f.svc.zones["fernhill/"+zone]
	f.svc.onReport(ref)(mqtt.Message{Topic: ref.reportTopic, Payload: b, Ack: func() { acked = true }})
	return acked
}

func fp(v float64) *float64 { return &v }

func TestTickPlansSendsExpiresAndCredits(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, start)
	f.hour(t, record(start.Truncate(time.Hour).Add(-time.Hour), 0.5, 0)) // valid ET, 30.5 mm everywhere

	// 30.5 >= trigger 20: refill to 0: 30.5 / 0.9 / 6 x 60 = 338.9 -> 339
	// minutes, capped at 240. Start: next whole minute after now + 1 min lead.
	_, sends, err := f.svc.tick(start)
	require.NoError(t, err)
	assert.Empty(t, sends, "not due before start - lead")
	led, err := f.svc.Ledger("fernhill")
	require.NoError(t, err)
	require.Len(t, led, 3)
	for _, c := range led {
		assert.Equal(t, 240, c.Minutes)
		assert.Equal(t, time.Date(2026, 7, 1, 10, 2, 0, 0, fernLoc), c.Start.In(fernLoc))
		assert.Equal(t, controllers.Planned, c.State)
	}

	now := start.Add(31 * time.Second) // 10:01:01 = start - lead
	_, sends, err = f.svc.tick(now)
	require.NoError(t, err)
	require.Len(t, sends, 3)
	var msg CommandMessage
	require.NoError(t, json.Unmarshal(sends[0].payload, &msg))
	assert.Equal(t, "etpulse/fernhill/zones/row-a/command", sends[0].topic)
	assert.Equal(t, CommandMessage{ID: "row-a-20260701T1802Z-c1", Zone: "row-a", Valve: "row-a", Minutes: 240,
		Start: time.Date(2026, 7, 1, 18, 2, 0, 0, time.UTC), Expiry: time.Date(2026, 7, 1, 18, 17, 0, 0, time.UTC),
		Cycle: 1, Cycles: 1, Attempt: 1, Reason: controllers.Reason{DepletionMM: 30.5, TriggerMM: 20, EtcSinceLastMM: 0.5,
			Basis: controllers.BasisTrigger, ShortMM: 8.9}}, msg)
	assert.Equal(t, 3.0, testutil.ToFloat64(f.svc.m.commands.WithLabelValues("fernhill", "row-a", "sent"))+
		testutil.ToFloat64(f.svc.m.commands.WithLabelValues("fernhill", "row-b", "sent"))+
		testutil.ToFloat64(f.svc.m.commands.WithLabelValues("fernhill", "row-c", "sent")))

	// row-a: accepted, finished with a meter reading, the finished report again.
	// Credit: 3240 L / 1000 m2 x 0.9 = 2.916 mm.
	// The reports arrive after the runs they describe (a report of a run
	// longer than the time since the start is refused); the scheduler's
	// passes below keep their own times.
	idA := "row-a-20260701T1802Z-c1"
	require.True(t, driveReport(f, "row-a", ReportMessage{ID: idA, State: "accepted"}))
	f.clock.set(time.Date(2026, 7, 1, 14, 2, 0, 0, fernLoc))
	require.True(t, driveReport(f, "row-a", ReportMessage{ID: idA, State: "finished", MinutesRun: fp(240), VolumeL: fp(3240)}))
	require.True(t, driveReport(f, "row-a", ReportMessage{ID: idA, State: "finished", MinutesRun: fp(240), VolumeL: fp(3240)}))
	assert.InDelta(t, 30.5-2.916, f.status(t, "row-a").State.Depletion, 1e-9)
	assert.Len(t, f.eventsOf(EventCredited), 1)
	assert.Equal(t, 1.0, testutil.ToFloat64(f.svc.m.commands.WithLabelValues("fernhill", "row-a", "duplicate")))

	// row-b fails after 30 minutes: 30/60 x 6 x 0.9 = 2.7 mm credited.
	idB := "row-b-20260701T1802Z-c1"
	require.True(t, driveReport(f, "row-b", ReportMessage{ID: idB, State: "failed", MinutesRun: fp(30), Reason: "pressure low"}))
	assert.InDelta(t, 30.5-2.7, f.status(t, "row-b").State.Depletion, 1e-9)
	f.clock.set(start)

	// Malformed and unknown reports are acknowledged and change nothing.
	b := []byte(`{"id": "row-a-x", "state": "finished", "minutes": 3}`)
	acked := false
	f.svc.onReport(f.svc.zones["fernhill/row-a"])(mqtt.Message{Topic: reportTopic("row-a"), Payload: b, Ack: func() { acked = true }})
	assert.True(t, acked)
	require.True(t, driveReport(f, "row-a", ReportMessage{ID: "row-a-unknown", State: "finished"}))
	require.True(t, driveReport(f, "row-a", ReportMessage{ID: idB, State: "finished"}), "another zone's id")
	assert.Equal(t, 3.0, testutil.ToFloat64(f.svc.m.badReports.WithLabelValues("fernhill", "row-a")), "counted under the zone whose topic they came on")

	// row-c never answers: re-sent at +2 and +4 minutes, expired at 10:17.
	// row-a, credited but still above its trigger (27.58 mm; the 240-minute
	// cap limited the run, 8.9 mm short), is not watered again in this
	// window: the shortfall carries over to the next one.
	now = now.Add(2 * time.Minute)
	_, sends, err = f.svc.tick(now)
	require.NoError(t, err)
	require.Len(t, sends, 1)
	require.NoError(t, json.Unmarshal(sends[0].payload, &msg))
	assert.Equal(t, "row-c", msg.Zone)
	assert.Equal(t, 2, msg.Attempt)
	now = now.Add(2 * time.Minute) // 10:05:01
	_, sends, err = f.svc.tick(now)
	require.NoError(t, err)
	byZone := map[string]CommandMessage{}
	for _, o := range sends {
		require.NoError(t, json.Unmarshal(o.payload, &msg))
		byZone[msg.Zone] = msg
	}
	require.Len(t, byZone, 1)
	assert.Equal(t, 3, byZone["row-c"].Attempt)
	next, sends, _ := f.svc.tick(now.Add(3 * time.Minute))
	assert.Empty(t, sends, "row-c: three attempts at most")
	assert.Equal(t, time.Date(2026, 7, 1, 10, 17, 0, 0, fernLoc), next.In(fernLoc))
	_, _, err = f.svc.tick(next)
	require.NoError(t, err)
	led, _ = f.svc.Ledger("fernhill")
	require.Len(t, led, 3)
	states := map[string]controllers.CommandState{}
	for _, c := range led {
		states[c.ID] = c.State
	}
	assert.Equal(t, map[string]controllers.CommandState{
		idA: controllers.Finished, idB: controllers.Failed, "row-c-20260701T1802Z-c1": controllers.Expired}, states)
	assert.InDelta(t, 30.5, f.status(t, "row-c").State.Depletion, 1e-9, "never credited without a report")
	assert.Equal(t, 1.0, testutil.ToFloat64(f.svc.m.commands.WithLabelValues("fernhill", "row-c", "expired")))

	// No new command for b (failed) and c (expired) in this window occurrence.
	_, _, err = f.svc.tick(next.Add(time.Minute))
	require.NoError(t, err)
	led, _ = f.svc.Ledger("fernhill")
	assert.Len(t, led, 3)
}

func TestHoldsCancelPlannedCommands(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, start)
	f.hour(t, record(start.Truncate(time.Hour).Add(-time.Hour), 0.5, 0))
	_, _, err := f.svc.tick(start)
	require.NoError(t, err)
	site := f.svc.sites[0]

	r := f.svc.applyHold(site, []byte(`{"id":"r1","zone":"row-b","action":"rain_delay","hours":24}`), start)
	assert.True(t, r.OK, r.Error)
	require.NotNil(t, r.Until)
	assert.Equal(t, start.Add(24*time.Hour).UTC(), *r.Until)
	r = f.svc.applyHold(site, []byte(`{"id":"r2","zone":"row-z","action":"hold"}`), start)
	assert.False(t, r.OK)
	assert.Contains(t, r.Error, "no zone")
	r = f.svc.applyHold(site, []byte(`{"id":"r3","action":"flood"}`), start)
	assert.False(t, r.OK)
	assert.Contains(t, r.Error, "action")

	led, _ := f.svc.Ledger("fernhill")
	for _, c := range led {
		if c.Zone == "row-b" {
			assert.Equal(t, controllers.Cancelled, c.State)
		} else {
			assert.Equal(t, controllers.Planned, c.State)
		}
	}
	// Site-wide hold until released: nothing more is sent.
	r = f.svc.applyHold(site, []byte(`{"id":"r4","action":"hold","reason":"pump repair"}`), start)
	require.True(t, r.OK)
	assert.Nil(t, r.Until)
	_, sends, _ := f.svc.tick(start.Add(2 * time.Minute))
	assert.Empty(t, sends)
	r = f.svc.applyHold(site, []byte(`{"id":"r5","action":"release"}`), start.Add(3*time.Minute))
	require.True(t, r.OK)
	// row-a and row-c plan again; row-b is still in its rain delay.
	_, _, _ = f.svc.tick(start.Add(3 * time.Minute))
	_, sends, _ = f.svc.tick(start.Add(5 * time.Minute))
	var zones []string
	for _, s := range sends {
		zones = append(zones, s.cmd.Zone)
	}
	assert.ElementsMatch(t, []string{"row-a", "row-c"}, zones)
}

func TestStaleETAlert(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 0, 0, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, start)
	// Never had valid ET: no commands from the start, the alert after
	// max_missing_hours (6 h) of running without valid ET.
	_, sends, err := f.svc.tick(start)
	require.NoError(t, err)
	assert.Empty(t, sends)
	assert.Empty(t, f.eventsOf(EventAlert), "a fresh start is not an outage")
	late := start.Add(6*time.Hour + time.Minute)
	_, sends, err = f.svc.tick(late)
	require.NoError(t, err)
	assert.Empty(t, sends)
	led, _ := f.svc.Ledger("fernhill")
	assert.Empty(t, led)
	assert.Len(t, f.eventsOf(EventAlert), 3)
	var alerts int
	require.NoError(t, f.out.History().Range(store.Filter{Measurements: []string{store.MeasurementZoneAlert}}, func(p store.Point) error {
		alerts++
		assert.Equal(t, "zone-et-stale", p.Tags["kind"])
		return nil
	}))
	assert.Equal(t, 3, alerts)
	// Valid ET clears it.
	f.hour(t, record(late.Truncate(time.Hour).Add(-time.Hour), 0.5, 0))
	_, _, err = f.svc.tick(late.Add(time.Second))
	require.NoError(t, err)
	assert.Len(t, f.eventsOf(EventAlert), 6)
}
