package controllers

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func at(day, h, m int) time.Time { return time.Date(2026, 7, day, h, m, 0, 0, stdLoc) }

// withWeather gives the state a recent valid hour (wind 2 m/s, 20 °C) so
// that weather holds have data and ET is not stale at now.
func withWeather(st *State, now time.Time) *State {
	s := now.Truncate(time.Hour).Add(-time.Hour)
	st.Hours = append(st.Hours, HourEntry{Start: s, Valid: true, Wind2: 2, AirTemp: 20, HasWind: true, HasTemp: true})
	st.LastValid = s.Add(time.Hour)
	return st
}

func TestDecidePlansOneRun(t *testing.T) {
	z := maizeZone()
	z.System.MaxMinutes = 300
	now := at(1, 21, 0)
	st := withWeather(&State{Depletion: 20, EtcSinceRun: 11}, now)
	// 20 mm is below the trigger (RAW 71.5): nothing.
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{})
	assert.Empty(t, p.Commands)

	st.Depletion = 75
	p = PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{})
	require.Len(t, p.Commands, 1)
	c := p.Commands[0]
	// Need 75 mm net -> 75 / 0.75 / 5 x 60 = 1200 min, capped at 300.
	assert.Equal(t, 300, c.Minutes)
	assert.Equal(t, at(1, 21, 1), c.Start) // now + 1 min send lead
	assert.Equal(t, at(1, 21, 16), c.Expiry)
	assert.Equal(t, "lowmead-north-20260702T0501Z-c1", c.ID)
	// 300 minutes put 300/60 x 5 x 0.75 = 18.75 mm net: 56.25 mm are owed
	// to the next window.
	assert.Equal(t, Reason{DepletionMM: 75, TriggerMM: 71.5, EtcSinceLastMM: 11, Basis: BasisTrigger, ShortMM: 56.25}, c.Reason)
	assert.Equal(t, 1, c.Cycle)
	assert.Equal(t, 1, c.Cycles)
	assert.Equal(t, Planned, c.State)

	// The same inputs give the same command (ids re-derive after a restart).
	assert.Equal(t, p, PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{}))

	// An open command blocks a second plan.
	p2 := PlanRuns(now.Add(5*time.Minute), []ZoneInput{{z, st}}, nil, p.Commands, Holds{})
	assert.Empty(t, p2.Commands)
	assert.Equal(t, "a command is still open", p2.Skips[0].Reason)
}

func TestDecideOutsideWindow(t *testing.T) {
	z := maizeZone()
	now := at(1, 12, 0)
	st := withWeather(&State{Depletion: 80}, now)
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{})
	assert.Empty(t, p.Commands)
	assert.Equal(t, "outside watering windows", p.Skips[0].Reason)
	assert.Equal(t, at(1, 21, 0), NextSlotStart(z.Windows, z.Loc, now))
}

func TestDecideCycleAndSoak(t *testing.T) {
	z := maizeZone()
	z.System.CycleMinutes, z.System.SoakMinutes = 60, 30
	z.Soil.RefillFraction = 0 // refill to field capacity
	now := at(1, 21, 0)
	// Need 9.375 mm: 9.375 / 0.75 / 5 x 60 = 150 minutes -> 3 cycles of 50.
	z.Soil.TriggerMM = 5
	st := withWeather(&State{Depletion: 9.375}, now)
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{})
	require.Len(t, p.Commands, 3)
	starts := []time.Time{at(1, 21, 1), at(1, 22, 21), at(1, 23, 41)}
	for i, c := range p.Commands {
		assert.Equal(t, 50, c.Minutes)
		assert.Equal(t, starts[i], c.Start)
		assert.Equal(t, i+1, c.Cycle)
		assert.Equal(t, 3, c.Cycles)
	}
}

func TestDecideSequencingByValvesAndFlow(t *testing.T) {
	a, b := maizeZone(), maizeZone()
	a.ID, b.ID = "field-a", "field-b"
	a.System.MaxMinutes, b.System.MaxMinutes = 120, 120
	now := at(1, 21, 0)
	sa := withWeather(&State{Depletion: 80}, now)
	sb := withWeather(&State{Depletion: 100}, now)
	zones := []ZoneInput{{a, sa}, {b, sb}}

	// One valve at a time: b is more depleted relative to TAW (100/130) and goes first.
	p := PlanRuns(now, zones, []Source{{ID: "lowmead-pump", MaxValves: 1}}, nil, Holds{})
	require.Len(t, p.Commands, 2)
	assert.Equal(t, "field-b", p.Commands[0].Zone)
	assert.Equal(t, at(1, 21, 1), p.Commands[0].Start)
	assert.Equal(t, "field-a", p.Commands[1].Zone)
	assert.Equal(t, at(1, 23, 1), p.Commands[1].Start) // after b's 120 minutes

	// Flow: each zone draws 5 mm/h x 20000 m2 / 60 = 1666.7 L/min.
	p = PlanRuns(now, zones, []Source{{ID: "lowmead-pump", MaxFlow: 3000}}, nil, Holds{})
	require.Len(t, p.Commands, 2)
	assert.Equal(t, at(1, 23, 1), p.Commands[1].Start)
	p = PlanRuns(now, zones, []Source{{ID: "lowmead-pump", MaxFlow: 3400}}, nil, Holds{})
	require.Len(t, p.Commands, 2)
	assert.Equal(t, at(1, 21, 1), p.Commands[1].Start)
	// A source that cannot feed the zone at all: alerted, never planned.
	p = PlanRuns(now, zones, []Source{{ID: "lowmead-pump", MaxFlow: 1000}}, nil, Holds{})
	assert.Empty(t, p.Commands)
	assert.True(t, p.Skips[0].Alert)
}

func TestDecideDailyCap(t *testing.T) {
	z := maizeZone()
	z.System.MaxMinutes, z.System.MaxPerDay = 300, 320
	now := at(1, 21, 0)
	st := withWeather(&State{Depletion: 90}, now)
	ledger := []Command{{ID: "old", Zone: z.ID, Minutes: 300, Start: at(1, 1, 0), State: Finished}}
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, ledger, Holds{})
	require.Len(t, p.Commands, 1)
	assert.Equal(t, 20, p.Commands[0].Minutes) // 320 - 300 left today
	ledger[0].Minutes = 315                    // 5 left < min 10: nothing
	p = PlanRuns(now, []ZoneInput{{z, st}}, nil, ledger, Holds{})
	assert.Empty(t, p.Commands)
	// A cancelled command charges nothing.
	ledger[0].State = Cancelled
	p = PlanRuns(now, []ZoneInput{{z, st}}, nil, ledger, Holds{})
	require.Len(t, p.Commands, 1)
	assert.Equal(t, 300, p.Commands[0].Minutes)
}

func TestDecideHolds(t *testing.T) {
	z := maizeZone()
	z.Holds = WeatherHolds{WindMax: 4, FrostC: 2, HasFrost: true, RainSkipMM: 5, RainLookback: 6 * time.Hour}
	now := at(1, 21, 0)
	run := func(st *State, h Holds) Plan { return PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, h) }

	st := withWeather(&State{Depletion: 80}, now)
	assert.Len(t, run(st, Holds{}).Commands, 1)

	p := run(st, Holds{Zones: map[string]Hold{z.ID: {Until: now.Add(time.Hour), Reason: "rain delay 24 h"}}})
	assert.Empty(t, p.Commands)
	assert.Equal(t, "hold: rain delay 24 h", p.Skips[0].Reason)
	assert.Empty(t, run(st, Holds{Site: Hold{Forever: true}}).Commands)
	assert.Len(t, run(st, Holds{Site: Hold{Until: now}}).Commands, 1, "an ended hold does not hold")

	st.Hours[0].Wind2 = 6
	assert.Contains(t, run(st, Holds{}).Skips[0].Reason, "wind 6.0 m/s")
	dz := *z
	dz.System.Kind = Drip // wind does not hold drip
	assert.Len(t, PlanRuns(now, []ZoneInput{{&dz, st}}, nil, nil, Holds{}).Commands, 1)
	st.Hours[0].Wind2 = 2

	st.Hours[0].AirTemp = 1
	assert.Contains(t, run(st, Holds{}).Skips[0].Reason, "frost")
	st.Hours[0].AirTemp = 20

	st.Hours[0].Rain = 6 // the latest hour: still raining
	assert.Contains(t, run(st, Holds{}).Skips[0].Reason, "rain still falling: 6.0 mm")
	st.Hours[0].Rain = 0
}

func TestDecideAfterLostReport(t *testing.T) {
	z := maizeZone()
	z.System.MaxMinutes = 60
	now := at(1, 23, 0)
	st := withWeather(&State{Depletion: 80}, now)
	lost := Command{ID: "lost", Zone: z.ID, Minutes: 60, Start: at(1, 21, 1), State: Expired, Attempts: 3}
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, []Command{lost}, Holds{})
	assert.Empty(t, p.Commands)
	assert.True(t, p.Skips[0].Alert)
	// Likewise after a failure.
	failed := lost
	failed.State = Failed
	p = PlanRuns(now, []ZoneInput{{z, st}}, nil, []Command{failed}, Holds{})
	assert.Empty(t, p.Commands)
	assert.Contains(t, p.Skips[0].Reason, "failed")
	// The next night it may water again.
	now = at(2, 21, 0)
	st = withWeather(&State{Depletion: 80}, now)
	p = PlanRuns(now, []ZoneInput{{z, st}}, nil, []Command{lost}, Holds{})
	assert.Len(t, p.Commands, 1)
}

func TestDecideBelowMinimumRun(t *testing.T) {
	z := maizeZone()
	z.Soil.TriggerMM = 0.2
	now := at(1, 21, 0)
	// 0.2 mm net needs 0.2/0.75/5 x 60 = 3.2 -> 4 minutes < 10; 10 minutes
	// would put 0.625 mm on a 0.2 mm deficit: skipped.
	st := withWeather(&State{Depletion: 0.2}, now)
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{})
	assert.Empty(t, p.Commands)
	// Refill leaves 0.2 mm (0.01 RAW = 0.715, limited to the trigger): at
	// 0.7 mm the need is 0.5 mm = 8 minutes, raised to the 10-minute minimum
	// because 0.625 mm still fits below field capacity.
	z.Soil.RefillFraction = 0.01
	st.Depletion = 0.7
	p = PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{})
	require.Len(t, p.Commands, 1)
	assert.Equal(t, 10, p.Commands[0].Minutes)
}

func TestDecideStaleHolds(t *testing.T) {
	z := maizeZone()
	now := at(1, 21, 0)
	st := &State{Depletion: 90} // never had valid ET
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{})
	assert.Empty(t, p.Commands)
	assert.True(t, p.Skips[0].Alert)
}

func TestSlotAcrossMidnight(t *testing.T) {
	ws := []Window{{Start: 21 * 60, End: 5 * 60}}
	s, ok := SlotAt(ws, stdLoc, at(2, 3, 0))
	require.True(t, ok)
	assert.Equal(t, at(1, 21, 0), s.Start)
	assert.Equal(t, at(2, 5, 0), s.End)
	_, ok = SlotAt(ws, stdLoc, at(2, 5, 0))
	assert.False(t, ok)
	assert.Equal(t, at(2, 21, 0), NextSlotStart(ws, stdLoc, at(2, 5, 0)))
}
