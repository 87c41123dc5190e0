package controllers

import (
	"fmt"
	"math"
	"sort"
	"time"
)

// Meter is a flow meter on the pipe of one zone (Zone) or of one water
// source shared by zones (Source): its readings are compared with the flow
// the ledger says should pass (the Flow of every command whose valve is
// open), within Tolerance.
type Meter struct {
	ID     string
	Zone   string // the zone whose pipe it measures; "" when Source is set
	Source string // the water source whose main it measures; "" when Zone is set
	// Tolerance is the share by which the measured flow may differ from the
	// expected one, e.g. 0.25 for ±25 %.
	Tolerance float64
	// HighFor, LowFor and IdleFor are how long a high flow, a low flow or
	// a flow with no valve open must last before it is reported: long
	// enough for laterals to fill after a valve opens and to drain after it
	// closes.
	HighFor, LowFor, IdleFor time.Duration
	// IdleLMin is the flow, L/min, below which the meter counts as still
	// when no valve is open (meter creep, a dripping fitting).
	IdleLMin float64
	// StopOnHigh asks for a stop of the runs behind a high flow (a burst
	// lateral) once it has lasted HighFor.
	StopOnHigh bool
	// Silent is how old the latest reading may be before the meter is not
	// judged at all.
	Silent time.Duration
}

// Validate reports the first impossible value.
func (m Meter) Validate() error {
	switch {
	case (m.Zone == "") == (m.Source == ""):
		return fmt.Errorf("meter %s: needs exactly one of zone or source, got zone %q, source %q: %w", m.ID, m.Zone, m.Source, ErrInput)
	case !(m.Tolerance >= MinFlowTolerance && m.Tolerance <= MaxFlowTolerance):
		return fmt.Errorf("meter %s: tolerance: must be within %g-%g, got %v: %w", m.ID, MinFlowTolerance, MaxFlowTolerance, m.Tolerance, ErrInput)
	case m.HighFor < 0 || m.LowFor < 0 || m.IdleFor < 0 || m.HighFor > MaxFlowDelay || m.LowFor > MaxFlowDelay || m.IdleFor > MaxFlowDelay:
		return fmt.Errorf("meter %s: high/low/idle delays: must be within 0-%v, got %v/%v/%v: %w", m.ID, MaxFlowDelay, m.HighFor, m.LowFor, m.IdleFor, ErrInput)
	case !(m.IdleLMin >= 0) || math.IsInf(m.IdleLMin, 0):
		return fmt.Errorf("meter %s: idle flow: must be >= 0 L/min, got %v: %w", m.ID, m.IdleLMin, ErrInput)
	case m.Silent <= 0:
		return fmt.Errorf("meter %s: silent after: must be > 0, got %v: %w", m.ID, m.Silent, ErrInput)
	}
	return nil
}

// FlowSample is one meter reading: the mean flow, L/min, over the interval
// ending at Time.
type FlowSample struct {
	Time time.Time
	LMin float64
}

// MeterInput is a meter and its recent readings, oldest first, for Decide.
type MeterInput struct {
	Meter   Meter
	Samples []FlowSample
}

// FlowKind names what a meter shows.
type FlowKind string

// The flow conditions.
const (
	FlowOK   FlowKind = ""         // as expected, or not judged
	FlowHigh FlowKind = "high"     // above expected + tolerance: a burst lateral, a broken emitter
	FlowLow  FlowKind = "low"      // below expected - tolerance: clogged emitters, a closed sub-main, low pressure
	FlowIdle FlowKind = "no-valve" // flow while no valve is commanded open: a valve stuck open, or water taken
)

// FlowCheck is the verdict on one meter at a moment.
type FlowCheck struct {
	Meter    string
	Kind     FlowKind
	Since    time.Time // first reading of the condition
	Due      time.Time // when the condition has lasted long enough to report
	Reported bool      // the condition has lasted its delay: alert it
	Measured float64   // latest reading, L/min
	Expected float64   // latest expected flow, L/min
	Commands []string  // the commands whose valves were open at the latest reading
	Text     string
}

// openAt returns the expected flow, L/min, through the meter at t from the
// ledger, the ids of the commands open then, and whether the flow is known:
// it is not while a command has been sent and its start has passed without
// a report (its valve may be open or not), nor while a stop is asked for
// and unconfirmed.
func (m Meter) openAt(t time.Time, ledger []Command) (float64, []string, bool) {
	flow, known := 0.0, true
	var ids []string
	for i := range ledger {
		c := &ledger[i]
		if (m.Zone != "" && c.Zone != m.Zone) || (m.Source != "" && c.Source != m.Source) {
			continue
		}
		if c.Attempts == 0 {
			continue // never sent
		}
		start := c.StartedAt
		switch {
		case c.Stopping() && !t.Before(c.StopAt):
			known = false
			continue
		case c.State == Started, c.State == Finished, c.State == Stopped, c.State == Failed:
			if start.IsZero() {
				if c.State == Started {
					known = false
				}
				continue
			}
		default:
			// Sent, accepted or expired without a start report: open or
			// not, nobody knows, from its planned start to its latest end.
			end := c.Expiry.Add(time.Duration(c.Minutes) * time.Minute)
			if !t.Before(c.Start) && t.Before(end) {
				known = false
			}
			continue
		}
		if t.Before(start) {
			continue
		}
		if !c.EndedAt.IsZero() && !t.Before(c.EndedAt) {
			continue
		}
		if c.EndedAt.IsZero() && !c.State.Open() {
			continue
		}
		flow += c.Flow
		ids = append(ids, c.ID)
	}
	return flow, ids, known
}

// classify returns the condition one reading shows against the expected
// flow.
func (m Meter) classify(measured, expected float64, known bool) FlowKind {
	switch {
	case !known:
		return FlowOK
	case expected == 0:
		if measured > m.IdleLMin {
			return FlowIdle
		}
	case measured > expected*(1+m.Tolerance):
		return FlowHigh
	case measured < expected*(1-m.Tolerance):
		return FlowLow
	}
	return FlowOK
}

// delay returns how long condition k must last before it is reported.
func (m Meter) delay(k FlowKind) time.Duration {
	switch k {
	case FlowHigh:
		return m.HighFor
	case FlowLow:
		return m.LowFor
	}
	return m.IdleFor
}

// CheckFlow judges a meter at now from its readings and the ledger: the
// condition of the latest reading (high, low, flow with no valve open) and
// how long the readings before it have shown the same. The condition is
// Reported once it has lasted its delay (HighFor, LowFor, IdleFor); until
// then Due says when it will have. A meter whose latest reading is older
// than Silent, or a reading taken while a valve's state is unknown, is not
// judged. Common practice, no source: the tolerance and delays are the
// integrator's to set.
func CheckFlow(now time.Time, in MeterInput, ledger []Command) FlowCheck {
	m := in.Meter
	out := FlowCheck{Meter: m.ID}
	n := len(in.Samples)
	if n == 0 || now.Sub(in.Samples[n-1].Time) > m.Silent {
		return out
	}
	last := in.Samples[n-1]
	exp, ids, known := m.openAt(last.Time, ledger)
	k := m.classify(last.LMin, exp, known)
	out.Measured, out.Expected, out.Commands = last.LMin, exp, ids
	if k == FlowOK {
		return out
	}
	since := last.Time
	for i := n - 2; i >= 0; i-- {
		s := in.Samples[i]
		e, _, kn := m.openAt(s.Time, ledger)
		if m.classify(s.LMin, e, kn) != k {
			break
		}
		since = s.Time
	}
	out.Kind, out.Since, out.Due = k, since, since.Add(m.delay(k))
	out.Reported = !now.Before(out.Due)
	lasted := now.Sub(since).Round(time.Second)
	scope := "zone " + m.Zone
	if m.Source != "" {
		scope = "source " + m.Source
	}
	switch k {
	case FlowHigh:
		out.Text = fmt.Sprintf(FlowStopPrefix+"meter %s (%s): flow %.1f L/min is %.0f %% above the expected %.1f L/min for %v: a burst lateral or broken emitters?",
			m.ID, scope, last.LMin, 100*(last.LMin/exp-1), exp, lasted)
	case FlowLow:
		out.Text = fmt.Sprintf("meter %s (%s): flow %.1f L/min is %.0f %% below the expected %.1f L/min for %v: clogged emitters, a closed sub-main or low pressure?",
			m.ID, scope, last.LMin, 100*(1-last.LMin/exp), exp, lasted)
	case FlowIdle:
		out.Text = fmt.Sprintf("meter %s (%s): flow %.1f L/min with no valve commanded open for %v: a valve stuck open, or water taken?",
			m.ID, scope, last.LMin, lasted)
	}
	return out
}

// MeterVolume returns the litres the readings account for between from and
// to: each reading's flow held over the interval since the reading before
// it (the first one covers only itself, nothing before it), clipped to
// [from, to]. ok is false when the readings do not reach both ends (the
// meter started late or went silent), so no cross-check can be made.
func MeterVolume(samples []FlowSample, from, to time.Time) (litres float64, ok bool) {
	if !to.After(from) || len(samples) < 2 {
		return 0, false
	}
	i := sort.Search(len(samples), func(i int) bool { return samples[i].Time.After(from) })
	if i == 0 || i == len(samples) || samples[len(samples)-1].Time.Before(to) {
		return 0, false
	}
	for ; i < len(samples); i++ {
		a, b := samples[i-1].Time, samples[i].Time
		if a.Before(from) {
			a = from
		}
		if b.After(to) {
			b = to
		}
		if b.After(a) {
			litres += samples[i].LMin * b.Sub(a).Minutes()
		}
		if !samples[i].Time.Before(to) {
			break
		}
	}
	return litres, true
}

// FlowStopPrefix begins the reason of a high-flow verdict, and so of the
// stop it asks for: a run stopped for it is not planned again in the same
// window occurrence (PlanRuns).
const FlowStopPrefix = "flow alarm: "

// stopForFlow asks for a stop of the commands behind a reported high flow
// on a meter that is set to stop on it, changing them in ledger, and
// cancels the later cycles of their runs that are still planned (the leak
// is still there): it returns the cancellations, whose reason is the flow
// alarm's.
func stopForFlow(now time.Time, fc FlowCheck, ledger []Command) []Action {
	var out []Action
	for _, id := range fc.Commands {
		for i := range ledger {
			s := &ledger[i]
			if s.ID != id || !s.MayRun() {
				continue
			}
			_, _ = s.RequestStop(now, fc.Text)
			for j := range ledger {
				c := &ledger[j]
				if c.State != Planned || c.Zone != s.Zone || c.Cycles != s.Cycles || c.Cycle <= s.Cycle || !c.Start.After(s.Start) {
					continue
				}
				reason := fmt.Sprintf("%s; cycle %d/%d stopped (%s), the rest of its run is cancelled", fc.Text, s.Cycle, s.Cycles, s.ID)
				if c.Cancel(now, reason) == nil {
					out = append(out, Action{Kind: ActCancel, Command: *c, Reason: reason})
				}
			}
		}
	}
	return out
}
