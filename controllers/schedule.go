package controllers

import (
	"fmt"
	"time"
)

// ActionKind names what the gateway must carry out for an Action.
type ActionKind string

// The kinds of actions.
const (
	ActPlan   ActionKind = "plan"   // store a new planned command
	ActSend   ActionKind = "send"   // publish the command (first attempt)
	ActResend ActionKind = "resend" // publish it again: no report came yet
	ActStop   ActionKind = "stop"   // publish a stop for the command's valve (first or repeated)
	ActCancel ActionKind = "cancel" // a planned command is withdrawn before it is sent
	ActExpire ActionKind = "expire" // no report came before expiry: it may have run, it is not credited
)

// Concern is the alert an action calls for.
type Concern string

// The concerns.
const (
	ConcernNone      Concern = ""
	ConcernNoReport  Concern = "no-report"  // a command got no report before its expiry (or was never sent)
	ConcernValveOpen Concern = "valve-open" // the valve may be open and its controller does not confirm a stop
)

// Action is one thing the gateway must do now: store Command as it is
// after the action (every action changes it), and publish, cancel or alert
// as its Kind and Concern say.
type Action struct {
	Kind    ActionKind
	Command Command
	Reason  string
	Concern Concern
}

// Input is one site at one moment, for Decide.
type Input struct {
	Zones   []ZoneInput
	Sources []Source
	Ledger  []Command
	Holds   Holds
	// Resume delays re-sends of commands sent before it: after a restart
	// the broker first delivers the reports queued while the gateway was
	// away. Zero: no delay.
	Resume time.Time
	// Forecast is the site's latest forecast; nil: none. Zones use it as
	// their ForecastRules say, and ignore it when it is stale.
	Forecast *Forecast
	// Meters are the flow meters of the site and their recent readings
	// (CheckFlow); nil: no meter is judged.
	Meters []MeterInput
}

// Decision is what Decide returns: the actions in the order to carry them
// out, the zones that got no run and why, and when Decide next has
// something to do if no hour closes and no report or hold arrives.
type Decision struct {
	Actions []Action
	Skips   []Skip
	Wake    time.Time
	// ForecastIgnored says why zones that use the forecast ignored it
	// (stale or issued in the future); "" when it was used or absent.
	ForecastIgnored string
	// Flows are the meters showing a high or low flow, or a flow with no
	// valve open (reported or still within their delay).
	Flows []FlowCheck
}

// silentStop is the reason of a stop sent because a run's latest possible
// end passed without a final report.
const silentStop = "no final report by the latest possible end of the run"

// Decide is the decision function of a site: the live gateway calls it at
// every hour close, report, hold and wake-up, and the backtest at the same
// moments, so a replay of a season decides exactly as the gateway did. It
// plans the runs that are due (PlanRuns), then walks the ledger: it sends
// planned commands when their send lead is reached (or cancels them when a
// hold, the weather or a changed configuration forbids them now), re-sends
// unanswered ones, expires those that got no report before their expiry,
// asks for stops of commands under a hold, and stops every valve that may
// still be open past its latest possible end, repeating the stop until the
// controller answers. Decide is pure: the Input is not modified.
func Decide(now time.Time, in Input) Decision {
	var d Decision
	ledger := append([]Command(nil), in.Ledger...)
	plan := planRuns(now, in.Zones, in.Sources, ledger, in.Holds, in.Forecast)
	for _, zi := range in.Zones {
		if p := zi.Zone.Forecast.ForecastProblem(in.Forecast, now); p != "" {
			d.ForecastIgnored = p
		}
	}
	d.Skips = plan.Skips
	why := map[string]string{}
	for _, w := range plan.Why {
		why[w.Zone] = w.Reason
	}
	known := map[string]bool{}
	for _, c := range ledger {
		known[c.ID] = true
	}
	for _, c := range plan.Commands {
		if !known[c.ID] {
			ledger = append(ledger, c)
			d.Actions = append(d.Actions, Action{Kind: ActPlan, Command: c, Reason: why[c.Zone]})
		}
	}

	zones := map[string]ZoneInput{}
	for _, zi := range in.Zones {
		zones[zi.Zone.ID] = zi
	}
	next := now.Add(time.Hour)
	soon := func(t time.Time) {
		if !t.IsZero() && t.After(now) && t.Before(next) {
			next = t
		}
	}
	soon(in.Resume)
	for _, mi := range in.Meters {
		if fc := CheckFlow(now, mi, ledger); fc.Kind != FlowOK {
			d.Flows = append(d.Flows, fc)
			if fc.Reported && fc.Kind == FlowHigh && mi.Meter.StopOnHigh {
				d.Actions = append(d.Actions, stopForFlow(now, fc, ledger)...)
			}
			soon(fc.Due)
		}
	}
	for i := range ledger {
		c := &ledger[i]
		if !c.State.Open() && !c.MayRun() {
			continue
		}
		zi, configured := zones[c.Zone]
		policy := DefaultPolicy
		if configured {
			policy = zi.Zone.Policy
		}
		if a, ok := step(now, c, zi, configured, policy, in, ledger); ok {
			d.Actions = append(d.Actions, a)
			if a.Kind == ActCancel && a.Reason != "" && configured {
				// Planned under a configuration since changed, or over a
				// cap lowered since: the zone is planned again at once.
				soon(now.Add(time.Second))
			}
		}
		if c.State.Open() || c.MayRun() {
			w := c.NextWake(policy)
			if c.State == Sent && w.Before(in.Resume) {
				w = in.Resume
			}
			soon(w)
		}
	}
	for _, zi := range in.Zones {
		z, st := zi.Zone, zi.State
		if !st.LastValid.IsZero() && !z.Stale(st, now) {
			soon(st.LastValid.Add(time.Duration(z.FailSafe.MaxMissingHours)*time.Hour + time.Second))
		}
		if slot, ok := SlotAt(z.Windows, z.Loc, now); ok {
			soon(slot.End) // the next window start becomes due then
		} else {
			soon(NextSlotStart(z.Windows, z.Loc, now))
		}
		if h, ok := in.Holds.Zones[z.ID]; ok && !h.Forever {
			soon(h.Until)
		}
	}
	if !in.Holds.Site.Forever {
		soon(in.Holds.Site.Until)
	}
	d.Wake = next
	return d
}

// step decides what to do with one ledger command at now, changing c (a
// copy owned by Decide) and returning the action, if any.
func step(now time.Time, c *Command, zi ZoneInput, configured bool, p CommandPolicy, in Input, ledger []Command) (Action, bool) {
	if h, held := in.Holds.For(c.Zone, now); held && c.MayRun() {
		// A command sent before the hold (or re-sent in a race with it)
		// is stopped, never re-sent: its stop is due at once.
		_, _ = c.RequestStop(now, holdText(h))
	}
	switch c.Due(now, p) {
	case StopSilent:
		if _, err := c.RequestStop(now, silentStop); err != nil {
			return Action{}, false
		}
		c.MarkStopSent(now)
		return Action{Kind: ActStop, Command: *c, Reason: c.StopReason, Concern: ConcernValveOpen}, true
	case SendStop:
		c.MarkStopSent(now)
		a := Action{Kind: ActStop, Command: *c, Reason: c.StopReason}
		if c.StopReason == silentStop || c.StopAttempts > p.MaxAttempts {
			a.Concern = ConcernValveOpen
			a.Reason = fmt.Sprintf("%s; stop %d not confirmed, the valve may still be open", c.StopReason, c.StopAttempts)
		}
		return a, true
	case Send:
		if c.Attempts > 0 && now.Before(in.Resume) {
			break
		}
		if c.State == Planned {
			reason := "zone no longer configured"
			if configured {
				reason, _ = zi.Zone.Blocked(zi.State, in.Holds, now)
				if reason == "" {
					reason = zi.Zone.SendCheck(c, ledger)
				}
				if reason == "" {
					reason = zi.Zone.forecastFrost(in.Forecast, now, c.Start.Add(time.Duration(c.Minutes)*time.Minute))
				}
				if reason == "" {
					reason = zi.Zone.forecastRainRecheck(in.Forecast, zi.State, now)
				}
			}
			if reason != "" {
				if err := c.Cancel(now, reason); err != nil {
					return Action{}, false
				}
				return Action{Kind: ActCancel, Command: *c, Reason: reason}, true
			}
		}
		kind := ActSend
		if c.Attempts > 0 {
			kind = ActResend
		}
		c.MarkSent(now)
		return Action{Kind: kind, Command: *c}, true
	case Expire:
		note := "no report before expiry"
		if c.State == Planned {
			note = "not sent before expiry (gateway down)"
		}
		c.MarkExpired(now, note)
		return Action{Kind: ActExpire, Command: *c, Reason: note, Concern: ConcernNoReport}, true
	}
	return Action{}, false
}

// holdText is the reason a hold gives for stopping a command.
func holdText(h Hold) string {
	if h.Reason != "" {
		return h.Reason
	}
	return "hold"
}
