package controllers

import (
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// The figures below are invented scenarios, not check values: the meter
// logic is arithmetic on the configured tolerance and delays.

func testMeter() Meter {
	return Meter{ID: "m1", Zone: "kestrel-b3", Tolerance: 0.2, HighFor: 2 * time.Minute, LowFor: 5 * time.Minute,
		IdleFor: 3 * time.Minute, IdleLMin: 1, Silent: 2 * time.Minute}
}

// samples returns readings of lmin every 15 s from from to to, both included.
func samples(from, to time.Time, lmin float64) []FlowSample {
	var out []FlowSample
	for t := from; !t.After(to); t = t.Add(15 * time.Second) {
		out = append(out, FlowSample{Time: t, LMin: lmin})
	}
	return out
}

// meteredCommand is a started 60-minute run of 100 L/min.
func meteredCommand(t *testing.T) Command {
	c := startedCommand(t)
	c.Flow = 100
	return c
}

func TestFlowLeakStopsRunWhenConfigured(t *testing.T) {
	c := meteredCommand(t)
	m := testMeter()
	m.StopOnHigh = true
	s := samples(c.Start, c.Start.Add(10*time.Minute), 100)
	s = append(s, samples(c.Start.Add(10*time.Minute+15*time.Second), c.Start.Add(11*time.Minute), 135)...)
	in := Input{Ledger: []Command{c}, Meters: []MeterInput{{Meter: m, Samples: s}}}

	now := c.Start.Add(11 * time.Minute)
	d := Decide(now, in)
	require.Len(t, d.Flows, 1)
	f := d.Flows[0]
	assert.Equal(t, FlowHigh, f.Kind)
	assert.False(t, f.Reported, "45 s of high flow, the delay is 2 min")
	assert.Equal(t, c.Start.Add(10*time.Minute+15*time.Second+2*time.Minute), f.Due)
	assert.Equal(t, f.Due, d.Wake, "Decide wakes when the condition is due")
	assert.Empty(t, d.Actions)

	s = append(s, samples(c.Start.Add(11*time.Minute+15*time.Second), c.Start.Add(13*time.Minute), 135)...)
	in.Meters[0].Samples = s
	now = c.Start.Add(13 * time.Minute)
	d = Decide(now, in)
	require.Len(t, d.Flows, 1)
	assert.True(t, d.Flows[0].Reported)
	assert.Equal(t, []string{c.ID}, d.Flows[0].Commands)
	require.Len(t, d.Actions, 1)
	a := d.Actions[0]
	assert.Equal(t, ActStop, a.Kind)
	assert.True(t, strings.HasPrefix(a.Reason, FlowStopPrefix), a.Reason)
	assert.Contains(t, a.Reason, "meter m1 (zone kestrel-b3): flow 135.0 L/min is 35 % above the expected 100.0 L/min")

	m.StopOnHigh = false
	in.Meters[0].Meter = m
	d = Decide(now, in)
	require.Len(t, d.Flows, 1)
	assert.True(t, d.Flows[0].Reported)
	assert.Empty(t, d.Actions, "reported, but no stop unless configured")
}

func TestFlowLowAndTransient(t *testing.T) {
	c := meteredCommand(t)
	m := testMeter()
	s := samples(c.Start, c.Start.Add(3*time.Minute), 60)
	s = append(s, FlowSample{Time: c.Start.Add(3*time.Minute + 15*time.Second), LMin: 95}) // back within tolerance once
	s = append(s, samples(c.Start.Add(3*time.Minute+30*time.Second), c.Start.Add(8*time.Minute), 60)...)
	in := MeterInput{Meter: m, Samples: s}

	f := CheckFlow(c.Start.Add(8*time.Minute), in, []Command{c})
	assert.Equal(t, FlowLow, f.Kind)
	assert.Equal(t, c.Start.Add(3*time.Minute+30*time.Second), f.Since, "one reading in tolerance restarts the count")
	assert.False(t, f.Reported)
	f = CheckFlow(c.Start.Add(8*time.Minute+30*time.Second), in, []Command{c})
	assert.True(t, f.Reported)
	assert.Contains(t, f.Text, "40 % below the expected 100.0 L/min")
}

func TestFlowWithNoValveOpen(t *testing.T) {
	c := meteredCommand(t)
	_, err := c.Apply(Report{ID: c.ID, State: ReportFinished, MinutesRun: 60, HasMinutes: true}, c.Start.Add(time.Hour), DefaultPolicy)
	require.NoError(t, err)
	m := testMeter()
	end := c.Start.Add(time.Hour)
	s := samples(c.Start, end.Add(-15*time.Second), 100)
	s = append(s, samples(end, end.Add(4*time.Minute), 18)...)
	in := MeterInput{Meter: m, Samples: s}

	f := CheckFlow(end.Add(4*time.Minute), in, []Command{c})
	assert.Equal(t, FlowIdle, f.Kind)
	assert.Equal(t, end, f.Since)
	assert.True(t, f.Reported)
	assert.Contains(t, f.Text, "with no valve commanded open")

	in.Samples = append(samples(c.Start, end.Add(-15*time.Second), 100), samples(end, end.Add(4*time.Minute), 0.5)...)
	assert.Equal(t, FlowOK, CheckFlow(end.Add(4*time.Minute), in, []Command{c}).Kind, "below the idle flow: creep")

	in.Meter.Zone = "other"
	in.Samples = samples(end, end.Add(4*time.Minute), 100)
	assert.Equal(t, FlowIdle, CheckFlow(end.Add(4*time.Minute), in, []Command{c}).Kind, "another zone's run does not explain this meter's flow")
}

func TestFlowNotJudged(t *testing.T) {
	c := testCommand()
	c.Flow = 100
	c.MarkSent(c.Start.Add(-time.Minute)) // sent, no report yet: open or not, nobody knows
	m := testMeter()
	in := MeterInput{Meter: m, Samples: samples(c.Start, c.Start.Add(10*time.Minute), 0)}
	assert.Equal(t, FlowOK, CheckFlow(c.Start.Add(10*time.Minute), in, []Command{c}).Kind)

	in.Samples = samples(c.Start.Add(-time.Hour), c.Start.Add(-50*time.Minute), 30)
	assert.Equal(t, FlowIdle, CheckFlow(c.Start.Add(-50*time.Minute), in, nil).Kind)
	assert.Equal(t, FlowOK, CheckFlow(c.Start.Add(-40*time.Minute), in, nil).Kind, "latest reading older than silent")
	assert.Empty(t, Decide(c.Start.Add(-40*time.Minute), Input{Meters: []MeterInput{in}}).Flows)
}

// A run stopped for a high flow is not planned again in the same window
// occurrence (the burst is still there); the skip is alerted.
func TestFlowStoppedRunNotPlannedAgain(t *testing.T) {
	z := maizeZone()
	now := at(1, 22, 0)
	st := withWeather(&State{Depletion: 80}, now)
	c := Command{ID: "burst", Zone: z.ID, Source: z.Source, Minutes: 120, Start: at(1, 21, 1), Expiry: at(1, 21, 16),
		State: Stopped, Attempts: 1, StartedAt: at(1, 21, 1), EndedAt: at(1, 21, 20),
		StopAt: at(1, 21, 19), StopReason: FlowStopPrefix + "meter m1"}
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, []Command{c}, Holds{})
	assert.Empty(t, p.Commands)
	require.Len(t, p.Skips, 1)
	assert.True(t, p.Skips[0].Alert)

	c.StopReason = "hold: storm" // a hold's stop: watered again once it ends
	p = PlanRuns(now, []ZoneInput{{z, st}}, nil, []Command{c}, Holds{})
	assert.NotEmpty(t, p.Commands)
}

func TestMeterVolume(t *testing.T) {
	t0 := at(1, 21, 0)
	var s []FlowSample
	for i := 0; i <= 20; i++ {
		s = append(s, FlowSample{Time: t0.Add(time.Duration(i) * time.Minute), LMin: 100})
	}
	v, ok := MeterVolume(s, t0.Add(5*time.Minute), t0.Add(15*time.Minute))
	require.True(t, ok)
	assert.InDelta(t, 1000, v, 1e-9)
	v, ok = MeterVolume(s, t0.Add(5*time.Minute+30*time.Second), t0.Add(6*time.Minute))
	require.True(t, ok)
	assert.InDelta(t, 50, v, 1e-9)
	_, ok = MeterVolume(s, t0.Add(-time.Minute), t0.Add(5*time.Minute))
	assert.False(t, ok, "readings start after the run")
	_, ok = MeterVolume(s, t0.Add(15*time.Minute), t0.Add(25*time.Minute))
	assert.False(t, ok, "readings end before the run")
}

func TestMeterValidate(t *testing.T) {
	assert.NoError(t, testMeter().Validate())
	for name, f := range map[string]func(*Meter){
		"both":      func(m *Meter) { m.Source = "well" },
		"neither":   func(m *Meter) { m.Zone = "" },
		"tolerance": func(m *Meter) { m.Tolerance = 0 },
		"delay":     func(m *Meter) { m.HighFor = 3 * time.Hour },
		"idle":      func(m *Meter) { m.IdleLMin = -1 },
		"silent":    func(m *Meter) { m.Silent = 0 },
	} {
		m := testMeter()
		f(&m)
		assert.ErrorIs(t, m.Validate(), ErrInput, name)
	}
}

// TestFlowStopCancelsLaterCycles: a leak stop during cycle 1/3 of a
// cycle-and-soak run cancels the run's planned cycles 2/3 and 3/3 at once,
// with the flow alarm as their reason; another zone's planned run is left
// alone.
func TestFlowStopCancelsLaterCycles(t *testing.T) {
	c := meteredCommand(t)
	c.Cycle, c.Cycles = 1, 3
	later := func(id string, k int, zone string) Command {
		p := testCommand()
		p.ID, p.Zone, p.Cycle, p.Cycles, p.Flow = id, zone, k, 3, 100
		p.Start, p.Expiry = c.Start.Add(time.Duration(k-1)*90*time.Minute), c.Start.Add(time.Duration(k-1)*90*time.Minute+15*time.Minute)
		return p
	}
	c2, c3 := later("c2", 2, c.Zone), later("c3", 3, c.Zone)
	other := later("other-c2", 2, "other-zone")
	m := testMeter()
	m.StopOnHigh = true
	s := samples(c.Start, c.Start.Add(10*time.Minute), 100)
	s = append(s, samples(c.Start.Add(10*time.Minute+15*time.Second), c.Start.Add(13*time.Minute), 135)...)
	in := Input{Ledger: []Command{c, c2, c3, other}, Meters: []MeterInput{{Meter: m, Samples: s}}}

	d := Decide(c.Start.Add(13*time.Minute), in)
	kinds := map[string]ActionKind{}
	for _, a := range d.Actions {
		kinds[a.Command.ID] = a.Kind
		if a.Kind == ActCancel {
			assert.True(t, strings.HasPrefix(a.Reason, FlowStopPrefix), a.Reason)
			assert.Contains(t, a.Reason, "meter m1")
			assert.Contains(t, a.Reason, "cycle 1/3 stopped")
			assert.Equal(t, Cancelled, a.Command.State)
		}
	}
	assert.Equal(t, map[string]ActionKind{c.ID: ActStop, "c2": ActCancel, "c3": ActCancel}, kinds)
}
