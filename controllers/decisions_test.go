package controllers

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// steadyState returns a state whose last 72 hours before now all had
// reference ET et mm/h (valid, wind 2 m/s, 20 °C) applied with Kc kc, and
// depletion dr.
func steadyState(now time.Time, et, kc, dr float64) *State {
	st := &State{Depletion: dr}
	last := now.Truncate(time.Hour)
	for h := KeepHours; h >= 1; h-- {
		s := last.Add(-time.Duration(h) * time.Hour)
		st.Hours = append(st.Hours, HourEntry{Start: s, Valid: true, ET: et, Kc: kc, Ks: 1, ETc: kc * et, ETcPot: kc * et,
			Wind2: 2, AirTemp: 20, HasWind: true, HasTemp: true})
	}
	st.LastValid = last
	return st
}

func actionsOf(d Decision, kind ActionKind) []Action {
	var out []Action
	for _, a := range d.Actions {
		if a.Kind == kind {
			out = append(out, a)
		}
	}
	return out
}

// Below the trigger, but the crop would cross it before the end of the
// next window: the zone is watered in this window, not after the crossing.
func TestDecideAnticipatesTheNextWindow(t *testing.T) {
	z := maizeZone() // Kc 1.2, RAW 71.5 mm (trigger), window 21:00-05:00
	now := at(1, 21, 2)
	// Recent crop ET 1.2 x 0.25 = 0.3 mm/h. The next window ends on day 3
	// at 05:00, 31.97 h away: 60 + 0.3 x 31.97 = 69.6 < 71.5, so wait.
	st := steadyState(now, 0.25, 1.2, 60)
	d := Decide(now, Input{Zones: []ZoneInput{{z, st}}})
	assert.Empty(t, actionsOf(d, ActPlan))

	// At 0.5 mm/h reference ET (0.6 mm/h crop ET): 60 + 0.6 x 31.97 = 79.2
	// would cross the trigger before the next window could refill: water now.
	st = steadyState(now, 0.5, 1.2, 60)
	d = Decide(now, Input{Zones: []ZoneInput{{z, st}}})
	plans := actionsOf(d, ActPlan)
	require.Len(t, plans, 1)
	c := plans[0].Command
	assert.Equal(t, at(1, 21, 3), c.Start)
	// Refill to the target (refill fraction 0: target 0): 60 mm net =
	// 60 / 0.75 / 5 x 60 = 960 minutes, capped at 600, and the window ends
	// at 05:00: 477 minutes from 21:03.
	assert.Equal(t, 477, c.Minutes)
	assert.Contains(t, plans[0].Reason, "projected")
	assert.Equal(t, BasisProjected, c.Reason.Basis)
	assert.InDelta(t, round2(60-NetMM(477, 5, 0.75)), c.Reason.ShortMM, 1e-9, "what the window left for the next one")
	// The same pass sends it (start within the send lead).
	require.Len(t, actionsOf(d, ActSend), 1)
}

// A run cut short by a cap carries over: the next window waters the rest
// even though the depletion is below the trigger and the projection too.
func TestDecideCarriesOverAShortRun(t *testing.T) {
	z := maizeZone()
	z.System.MaxMinutes = 120 // 7.5 mm net per run
	night1 := at(1, 21, 3)
	prev := Command{ID: CommandID(z.ID, night1, 1), Zone: z.ID, Valve: z.Valve, Source: z.Source, Minutes: 120,
		Start: night1, Expiry: night1.Add(15 * time.Minute), Cycle: 1, Cycles: 1, State: Finished, Attempts: 1,
		Rate: 5, Efficiency: 0.75, Area: z.Area, Flow: z.Flow(), MinutesRun: 120, RunKnown: true, Credited: true,
		EndedAt: night1.Add(2 * time.Hour), Reason: Reason{DepletionMM: 40, TriggerMM: 71.5, ShortMM: 32.5}}
	now := at(2, 21, 2)
	st := steadyState(now, 0.1, 1.2, 35)
	d := Decide(now, Input{Zones: []ZoneInput{{z, st}}, Ledger: []Command{prev}})
	plans := actionsOf(d, ActPlan)
	require.Len(t, plans, 1)
	assert.Contains(t, plans[0].Reason, "carries over")
	assert.Equal(t, 120, plans[0].Command.Minutes)

	// Within the window of the short run itself, no second run is planned.
	st = steadyState(night1.Add(3*time.Hour), 0.1, 1.2, 35)
	d = Decide(night1.Add(3*time.Hour), Input{Zones: []ZoneInput{{z, st}}, Ledger: []Command{prev}})
	assert.Empty(t, actionsOf(d, ActPlan))
}

// One run per window occurrence: after a refill the projection may still
// reach the trigger (a tight trigger), but the zone waits for the next window.
func TestDecideOneRunPerWindow(t *testing.T) {
	z := maizeZone()
	z.Soil.TriggerMM = 10
	night := at(1, 21, 3)
	done := Command{ID: CommandID(z.ID, night, 1), Zone: z.ID, Minutes: 100, Start: night, Expiry: night.Add(15 * time.Minute),
		Cycle: 1, Cycles: 1, State: Finished, Attempts: 1, Rate: 5, Efficiency: 0.75, Area: z.Area, Credited: true}
	now := at(1, 23, 2)
	st := steadyState(now, 0.5, 1.2, 2)
	d := Decide(now, Input{Zones: []ZoneInput{{z, st}}, Ledger: []Command{done}})
	assert.Empty(t, actionsOf(d, ActPlan))
}

// Rain already entered the balance: the depletion is what remains after it.
// Comparing the same rain with that depletion again would count it twice.
func TestDecideCountsRainOnce(t *testing.T) {
	z := maizeZone()
	z.Soil.TriggerMM = 3
	z.Holds = WeatherHolds{RainLookback: 6 * time.Hour}
	now := at(1, 21, 0)
	st := withWeather(&State{Depletion: 4}, now)
	st.Hours[0].Rain = 4.5
	d := Decide(now, Input{Zones: []ZoneInput{{z, st}}})
	require.Len(t, actionsOf(d, ActPlan), 1, "skips: %+v", d.Skips)
}

// The rain hold looks at rain still arriving (the latest hour had rain),
// not at rain that fell earlier and is already in the balance.
func TestRainHoldOnlyWhileRaining(t *testing.T) {
	z := maizeZone()
	z.Holds = WeatherHolds{RainSkipMM: 5, RainLookback: 6 * time.Hour}
	now := at(1, 22, 0)
	st := steadyState(now, 0.3, 1.2, 80)
	st.Hours[len(st.Hours)-3].Rain = 6 // 19:00-20:00, since stopped
	r, _ := z.Blocked(st, Holds{}, now)
	assert.Empty(t, r)
	st.Hours[len(st.Hours)-1].Rain = 0.4 // 21:00-22:00: still raining
	r, _ = z.Blocked(st, Holds{}, now)
	assert.Contains(t, r, "rain")
}

// A daily threshold keeps a long drizzle: eight hours of 0.4 mm are 3.2 mm
// in the day; with P0 = 2 mm per day and f = 1, 1.2 mm is effective, where
// the same threshold per hour would keep nothing.
func TestEffectiveRainDailyThreshold(t *testing.T) {
	z := maizeZone()
	z.Rain = EffectiveRain{Method: RainFractionAboveDailyThreshold, Fraction: 1, Threshold: 2}
	st := &State{Depletion: 50}
	eff := 0.0
	for h := 8; h < 16; h++ {
		s, ok, err := z.StepHour(st, validHour(h, 0, 0.4))
		require.NoError(t, err)
		require.True(t, ok)
		eff += s.EffRain
	}
	assert.InDelta(t, 1.2, eff, 1e-9)
	// The next day starts again below the threshold.
	s, _, err := z.StepHour(st, validHour(24+8, 0, 1.5))
	require.NoError(t, err)
	assert.Zero(t, s.EffRain)
	// A revision of a drizzle hour moves the day's effective rain by the
	// difference above the threshold: 0.4 -> 1.4 mm adds 1 mm.
	rev := validHour(10, 0, 1.4)
	rev.Revision = 1
	s, ok, err := z.StepHour(st, rev)
	require.NoError(t, err)
	require.True(t, ok)
	assert.InDelta(t, 1.0, s.EffRain, 1e-9)
}

// A started run whose controller falls silent gets a stop once its latest
// possible end has passed, with the valve-open concern, and then stops until
// a final report arrives; it is never quietly expired.
func TestSilentStartedRunIsStopped(t *testing.T) {
	z := maizeZone()
	p := z.Policy
	c := testCommand()
	c.Zone, c.Valve = z.ID, z.Valve
	c.MarkSent(c.Start.Add(-time.Minute))
	_, err := c.Apply(Report{ID: c.ID, State: ReportStarted}, c.Start, p)
	require.NoError(t, err)
	end := c.Start.Add(60*time.Minute + p.FinishGrace)

	var stops []time.Time
	ledger := []Command{c}
	for now := c.Start; now.Before(c.Start.Add(12 * time.Hour)); now = now.Add(time.Minute) {
		st := steadyState(now, 0.1, 1.2, 10)
		d := Decide(now, Input{Zones: []ZoneInput{{z, st}}, Ledger: ledger})
		for _, a := range d.Actions {
			switch a.Kind {
			case ActStop:
				if len(stops) == 0 {
					assert.Equal(t, ConcernValveOpen, a.Concern)
					assert.Equal(t, end, now, "first stop at the latest possible end")
				}
				stops = append(stops, now)
			case ActExpire, ActSend, ActResend, ActPlan:
				t.Fatalf("unexpected %s at %v", a.Kind, now)
			}
			ledger = []Command{a.Command}
		}
	}
	require.Greater(t, len(stops), p.MaxAttempts, "stops go on after the usual attempts")
	for i := 1; i < len(stops); i++ {
		assert.LessOrEqual(t, stops[i].Sub(stops[i-1]), maxStopInterval)
	}
	c = ledger[0]
	assert.True(t, c.Stopping())
	assert.True(t, c.State.Open(), "the zone stays blocked while the valve may be open")
	o, err := c.Apply(Report{ID: c.ID, State: ReportStopped, MinutesRun: 60, HasMinutes: true}, c.Start.Add(13*time.Hour), p)
	require.NoError(t, err)
	assert.True(t, o.Credit)
	assert.False(t, c.Stopping())
}

// A command sent and never answered expires at its expiry (it may have run)
// and is stopped once its latest possible end has passed.
func TestSilentSentCommandIsStopped(t *testing.T) {
	z := maizeZone()
	p := z.Policy
	c := testCommand()
	c.Zone, c.Valve = z.ID, z.Valve
	c.Attempts, c.State, c.SentAt = p.MaxAttempts, Sent, c.Start
	ledger := []Command{c}
	var kinds []ActionKind
	var when []time.Time
	for now := c.Start; now.Before(c.Start.Add(3 * time.Hour)); now = now.Add(time.Minute) {
		st := steadyState(now, 0.1, 1.2, 10)
		d := Decide(now, Input{Zones: []ZoneInput{{z, st}}, Ledger: ledger})
		for _, a := range d.Actions {
			kinds = append(kinds, a.Kind)
			when = append(when, now)
			ledger = []Command{a.Command}
		}
	}
	require.GreaterOrEqual(t, len(kinds), 2)
	assert.Equal(t, ActExpire, kinds[0])
	assert.Equal(t, c.Expiry, when[0])
	assert.Equal(t, ActStop, kinds[1])
	assert.Equal(t, c.Expiry.Add(60*time.Minute+p.FinishGrace), when[1])
}

// A report of far more than was commanded is credited only up to the
// commanded water plus the margin, and says so naming both figures.
func TestOverrunCreditCapped(t *testing.T) {
	p := DefaultPolicy // margin 10 %
	c := testCommand()
	c.Minutes = 2
	c.MarkSent(c.Start)
	o, err := c.Apply(Report{ID: c.ID, State: ReportFinished, MinutesRun: 60, HasMinutes: true}, c.Start.Add(60*time.Minute), p)
	require.NoError(t, err)
	// Cap: 2 x 1.1 = 2.2 min at 0.8 mm/h x 0.9 = 0.0264 mm.
	assert.InDelta(t, NetMM(2.2, 0.8, 0.9), o.CreditMM, 1e-12)
	assert.Contains(t, o.Overrun, "60")
	assert.Contains(t, o.Overrun, "2 min")
	assert.InDelta(t, 60, c.MinutesRun, 0, "the reported figure is kept")

	// A broken (or forged) meter: 1e15 litres is more than the valve can
	// pass since the start and is refused (TestReportMinutesBeyondElapsedRefused);
	// 4000 L an hour after the start (the flow of 66.7 L/min could pass it)
	// credits the cap, no more.
	c = testCommand()
	c.Minutes = 2
	c.Flow = c.Rate * c.Area / 60
	c.MarkSent(c.Start)
	_, err = c.Apply(Report{ID: c.ID, State: ReportFinished, VolumeL: 1e15, HasVolume: true}, c.Start.Add(3*time.Minute), p)
	require.Error(t, err)
	o, err = c.Apply(Report{ID: c.ID, State: ReportFinished, VolumeL: 4000, HasVolume: true}, c.Start.Add(60*time.Minute), p)
	require.NoError(t, err)
	assert.InDelta(t, NetMM(2.2, 0.8, 0.9), o.CreditMM, 1e-12)
	assert.Contains(t, o.Overrun, "volume")
	assert.Equal(t, 4000.0, c.VolumeL)

	// Within the margin nothing is said and all of it counts.
	c = testCommand()
	c.MarkSent(c.Start)
	o, err = c.Apply(Report{ID: c.ID, State: ReportFinished, MinutesRun: 65, HasMinutes: true}, c.Start.Add(65*time.Minute), p)
	require.NoError(t, err)
	assert.Empty(t, o.Overrun)
	assert.InDelta(t, NetMM(65, 0.8, 0.9), o.CreditMM, 1e-12)
}
