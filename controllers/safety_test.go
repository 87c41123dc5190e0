package controllers

import (
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// A planned command that expired without ever being sent (the gateway was
// down at its start) never ran: it must not eat the day's cap.
func TestDecideNeverSentExpiredNotCharged(t *testing.T) {
	z := maizeZone()
	z.System.MaxMinutes = 240
	z.System.MaxPerDay = 300
	now := at(1, 22, 0)
	st := withWeather(&State{Depletion: 80}, now)
	unsent := Command{ID: "unsent", Zone: z.ID, Minutes: 240, Start: at(1, 21, 1), Expiry: at(1, 21, 16),
		State: Expired, Note: "not sent before expiry (gateway down)"}
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, []Command{unsent}, Holds{})
	require.Len(t, p.Commands, 1)
	assert.Equal(t, 240, p.Commands[0].Minutes, "the full run: nothing ran today")

	// Once sent (Attempts > 0) an expired command may have run: it counts
	// in full (and the zone is not watered again in this window).
	sent := unsent
	sent.Attempts = 1
	assert.Equal(t, 240, sent.chargedMinutes())
}

// A command in the ledger that expired after being sent may still be
// running (its reports were lost): another zone on the same one-valve
// source must not start before that run's latest possible end, Expiry +
// Minutes.
func TestDecideExpiredMayStillOccupySource(t *testing.T) {
	a, b := maizeZone(), maizeZone()
	b.ID, b.Valve = "lowmead-south", "v2"
	src := Source{ID: a.Source, MaxValves: 1}
	now := at(1, 21, 30)
	stB := withWeather(&State{Depletion: 80}, now)
	lostA := Command{ID: "a-lost", Zone: a.ID, Source: a.Source, Flow: a.Flow(), Minutes: 120,
		Start: at(1, 21, 1), Expiry: at(1, 21, 16), State: Expired, Attempts: 3}
	p := PlanRuns(now, []ZoneInput{{b, stB}}, []Source{src}, []Command{lostA}, Holds{})
	require.NotEmpty(t, p.Commands)
	// A may have started as late as 21:16 and run 120 minutes: 23:16.
	assert.False(t, p.Commands[0].Start.Before(at(1, 23, 16)), "start %v overlaps the run that may still be open", p.Commands[0].Start)

	// Once that latest end has passed, it no longer counts.
	now = at(1, 23, 20)
	stB = withWeather(&State{Depletion: 80}, now)
	p = PlanRuns(now, []ZoneInput{{b, stB}}, []Source{src}, []Command{lostA}, Holds{})
	require.NotEmpty(t, p.Commands)
	assert.Equal(t, at(1, 23, 21), p.Commands[0].Start)
}

// A controller that closes the valve on its own (a stopped report without a
// stop asked for: a flow alarm, someone pressing stop in the field) has a
// reason the gateway does not know: the zone is not watered again in the
// same window occurrence, like after a failure.
func TestDecideAfterStopAtController(t *testing.T) {
	z := maizeZone()
	now := at(1, 22, 0)
	st := withWeather(&State{Depletion: 80}, now)
	stopped := Command{ID: "s", Zone: z.ID, Minutes: 60, Start: at(1, 21, 1), State: Stopped, Attempts: 1,
		RunKnown: true, MinutesRun: 2, Credited: true}
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, []Command{stopped}, Holds{})
	assert.Empty(t, p.Commands)
	require.Len(t, p.Skips, 1)
	assert.Contains(t, p.Skips[0].Reason, "stopped")
	assert.True(t, p.Skips[0].Alert)

	// Stopped because the gateway asked (a hold, since released): the next
	// decision plans a new run, as documented.
	stopped.StopAt = at(1, 21, 3)
	p = PlanRuns(now, []ZoneInput{{z, st}}, nil, []Command{stopped}, Holds{})
	assert.Len(t, p.Commands, 1)
}

// A report can only be about a command that was sent: one for a command
// still planned (never published) is refused and credits nothing.
func TestReportForUnsentCommandRefused(t *testing.T) {
	c := Command{ID: "x", Zone: "z", Minutes: 30, Rate: 6, Efficiency: 0.9, Area: 1000, State: Planned}
	out, err := c.Apply(Report{ID: "x", State: ReportFinished, MinutesRun: 30, HasMinutes: true}, at(1, 21, 0), DefaultPolicy)
	require.ErrorIs(t, err, ErrInput)
	assert.False(t, out.Credit)
	assert.Equal(t, Planned, c.State)
	_, err = c.Apply(Report{ID: "x", State: ReportStarted}, at(1, 21, 0), DefaultPolicy)
	require.ErrorIs(t, err, ErrInput)

	// Likewise one that expired without ever being sent.
	c.State = Expired
	_, err = c.Apply(Report{ID: "x", State: ReportFinished}, at(1, 21, 0), DefaultPolicy)
	require.ErrorIs(t, err, ErrInput)
	assert.False(t, c.Credited)
}

// A revision that raises an hour's ET after that hour's rain drained below
// the root zone takes the extra ET out of the drainage counted for the
// hour, not out of the soil: the soil was at field capacity at the end of
// that hour either way (FAO-56 eq. 85, 88).
func TestRevisionAfterDrainage(t *testing.T) {
	z := maizeZone()
	z.Rain = EffectiveRain{Method: RainAll}
	st := &State{Depletion: 5}
	// Hour 0: 0.5 mm ET x Kc 1.2 = 0.6 mm, 20 mm rain: 5 + 0.6 - 20 < 0,
	// drainage 14.4 mm, Dr 0.
	s, ok, err := z.StepHour(st, validHour(0, 0.5, 20))
	require.NoError(t, err)
	require.True(t, ok)
	assert.InDelta(t, 14.4, s.Drainage, 1e-9)
	assert.Zero(t, st.Depletion)
	// Hour 1: 0.5 mm ET -> Dr 0.6.
	_, _, err = z.StepHour(st, validHour(1, 0.5, 0))
	require.NoError(t, err)
	assert.InDelta(t, 0.6, st.Depletion, 1e-9)

	// Hour 0 revised: ET 0.8 (0.96 mm ETc, +0.36). Re-deriving by hand:
	// 5 + 0.96 - 20 < 0, drainage 14.04, Dr 0 at the end of hour 0, then
	// 0.6 in hour 1: Dr stays 0.6; the step returns -0.36 mm of drainage.
	rev := validHour(0, 0.8, 20)
	rev.Revision = 1
	s, ok, err = z.StepHour(st, rev)
	require.NoError(t, err)
	require.True(t, ok)
	assert.InDelta(t, 0.6, st.Depletion, 1e-9)
	assert.InDelta(t, 0.36, s.ETc, 1e-9)
	assert.InDelta(t, -0.36, s.Drainage, 1e-9)
	assert.InDelta(t, 14.04, s.Hour.Drainage, 1e-9, "the hour's total drainage")

	// A revision raising ET by more than the hour drained: the rest
	// depletes the soil. Hour 2 drains 0.4 mm; revised +1.2 mm ETc.
	st2 := &State{}
	_, _, err = z.StepHour(st2, validHour(2, 0.5, 1.0)) // 0 + 0.6 - 1.0: DP 0.4
	require.NoError(t, err)
	rev = validHour(2, 1.5, 1.0) // ETc 1.8: 0 + 1.8 - 1.0 = 0.8, no DP
	rev.Revision = 1
	s, _, err = z.StepHour(st2, rev)
	require.NoError(t, err)
	assert.InDelta(t, 0.8, st2.Depletion, 1e-9)
	assert.InDelta(t, -0.4, s.Drainage, 1e-9)
	assert.InDelta(t, 0, s.Hour.Drainage, 1e-9)
}

// A planned command is checked again before its first send against the
// zone as configured now (a restart may bring a changed configuration).
func TestSendCheck(t *testing.T) {
	z := maizeZone()
	z.System.MaxMinutes, z.System.MaxPerDay, z.System.CycleMinutes, z.System.SoakMinutes = 240, 300, 120, 30
	now := at(1, 21, 0)
	st := withWeather(&State{Depletion: 80}, now)
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{})
	require.Len(t, p.Commands, 2) // 240 minutes in two 120-minute cycles
	led := p.Commands
	for i := range led {
		assert.Empty(t, z.SendCheck(&led[i], led), "unchanged configuration")
	}

	lowered := *z
	lowered.System.MaxMinutes, lowered.System.CycleMinutes = 200, 100
	assert.Contains(t, lowered.SendCheck(&led[0], led), "exceed the zone's caps")

	// Cycle 1 ran; a lowered per-run cap (cycles unchanged) stops cycle 2.
	led[0].State, led[0].Attempts = Finished, 1
	lowered = *z
	lowered.System.MaxMinutes = 200
	assert.Contains(t, lowered.SendCheck(&led[1], led), "run of 240 minutes")
	// A lowered day cap likewise.
	lowered = *z
	lowered.System.MaxPerDay = 200
	assert.Contains(t, lowered.SendCheck(&led[1], led), "max_minutes_per_day")

	// A changed rate, valve or area makes the planned minutes meaningless.
	for _, change := range []func(*Zone){
		func(z *Zone) { z.System.Rate = 10 },
		func(z *Zone) { z.Valve = "v9" },
		func(z *Zone) { z.Area = 10000 },
	} {
		changed := *z
		change(&changed)
		assert.Contains(t, changed.SendCheck(&led[1], led), "configuration changed")
	}
}
