package controllers

import (
	"fmt"
	"math"
	"sort"
	"strings"
	"time"
)

// WeatherHolds are a zone's weather conditions for not watering.
type WeatherHolds struct {
	// WindMax: sprinkler zones do not start while the latest hour's mean wind
	// at 2 m exceeds it (m/s); 0 disables. Unknown wind also holds.
	WindMax float64
	// Frost: no zone starts while the latest hour's mean air temperature is
	// below FrostC (°C); HasFrost enables. Unknown temperature also holds.
	FrostC   float64
	HasFrost bool
	// RainSkip: no start while rain is still falling (the latest hour had
	// rain) and the rain of the last RainLookback is at least RainSkipMM (0
	// disables). Rain that has stopped is already in the balance: it lowers
	// the depletion and is never compared with the need again.
	RainSkipMM   float64
	RainLookback time.Duration
}

// Hold is a manual hold or a rain delay.
type Hold struct {
	Until   time.Time // the hold ends at Until
	Forever bool      // the hold lasts until released
	Reason  string
}

// Active reports whether the hold is in force at now.
func (h Hold) Active(now time.Time) bool { return h.Forever || now.Before(h.Until) }

// Holds are the manual holds and rain delays of a site and its zones.
type Holds struct {
	Site  Hold
	Zones map[string]Hold
}

// For returns the hold in force for a zone at now, if any.
func (h Holds) For(zone string, now time.Time) (Hold, bool) {
	if h.Site.Active(now) {
		return h.Site, true
	}
	if z, ok := h.Zones[zone]; ok && z.Active(now) {
		return z, true
	}
	return Hold{}, false
}

// Source is a water source shared by zones: a well, a pump, a main.
type Source struct {
	ID        string
	MaxValves int     // valves open at once; 0: no limit
	MaxFlow   float64 // L/min; 0: no limit
}

// ZoneInput is one zone and its current balance, for Decide.
type ZoneInput struct {
	Zone  *Zone
	State *State
}

// Skip says why a zone got no command.
type Skip struct {
	Zone   string
	Reason string
	Alert  bool // the condition should be alerted (e.g. stale ET)
}

// Plan is the result of PlanRuns.
type Plan struct {
	Commands []Command
	Skips    []Skip
	// Why says, per zone given a run, why it was due (Skip.Reason holds
	// the text).
	Why []Skip
}

// Flow returns the zone's flow, L/min.
func (z *Zone) Flow() float64 {
	if z.System.Flow > 0 {
		return z.System.Flow
	}
	return z.System.Rate * z.Area / 60
}

// Blocked reports why the zone must not start water at now, or "" when it
// may: manual hold or rain delay, stale ET without fallback, rain, wind
// (sprinklers), frost. Decide checks it before planning and the scheduler
// again before sending.
func (z *Zone) Blocked(st *State, holds Holds, now time.Time) (reason string, alert bool) {
	if h, ok := holds.For(z.ID, now); ok {
		r := "hold"
		if h.Reason != "" {
			r += ": " + h.Reason
		}
		return r, false
	}
	if z.Stale(st, now) && !z.FailSafe.Fallback {
		return fmt.Sprintf("no valid ET for more than %d h", z.FailSafe.MaxMissingHours), true
	}
	w := st.Recent(now, z.Holds.RainLookback)
	if z.Holds.RainSkipMM > 0 && w.Raining && w.Rain >= z.Holds.RainSkipMM {
		return fmt.Sprintf("rain still falling: %.1f mm in the last %v", w.Rain, z.Holds.RainLookback), false
	}
	if z.System.Kind == Sprinkler && z.Holds.WindMax > 0 {
		if !w.HasWind {
			return "wind unknown", false
		}
		if w.Wind2 > z.Holds.WindMax {
			return fmt.Sprintf("wind %.1f m/s above %.1f", w.Wind2, z.Holds.WindMax), false
		}
	}
	if z.Holds.HasFrost {
		if !w.HasTemp {
			return "air temperature unknown", false
		}
		if w.AirTemp < z.Holds.FrostC {
			return fmt.Sprintf("air temperature %.1f °C below frost limit %.1f", w.AirTemp, z.Holds.FrostC), false
		}
	}
	return "", false
}

type interval struct {
	start, end time.Time
	flow       float64
}

type candidate struct {
	in      ZoneInput
	lv      Levels
	minutes int
	need    float64 // net mm to refill to the target
	slot    Slot
	reason  Reason
}

// farFuture ends the source occupancy of a valve that may be open until its
// controller answers.
var farFuture = time.Date(9999, 1, 1, 0, 0, 0, 0, time.UTC)

// due decides whether zone z should be watered in slot (the window
// occurrence holding now) and on which basis: its depletion has reached the
// trigger; or, projected forward at the recent crop ET, it would cross the
// trigger before the end of the next window occurrence (waiting would water
// too late); or the zone's previous run, in an earlier window, was cut short
// by a cap or its window's end and the remainder is still owed. It returns
// the reason and its text ("" when the zone is not due). A fresh forecast
// (fc) that covers the time to the end of the next window replaces the
// recent crop ET by the forecast crop ET in the projection.
func (z *Zone) due(st *State, lv Levels, now time.Time, slot Slot, last *Command, fc *Forecast) (Reason, string) {
	r := Reason{DepletionMM: round2(st.Depletion), TriggerMM: round2(lv.Trigger), EtcSinceLastMM: round2(st.EtcSinceRun)}
	if st.Depletion >= lv.Trigger {
		r.Basis = BasisTrigger
		return r, fmt.Sprintf("depletion %.1f mm at or above the trigger %.1f mm", st.Depletion, lv.Trigger)
	}
	answered := false // the forecast covers the horizon: recent ET is not used
	if next, ok := SlotAt(z.Windows, z.Loc, NextSlotStart(z.Windows, z.Loc, slot.Start)); ok && fc != nil {
		if etc, covered := z.forecastETc(fc, now, next.End); covered {
			answered = true
			proj := st.Depletion + etc
			if proj >= lv.Trigger {
				r.Basis, r.ProjectedMM = BasisProjected, round2(proj)
				return r, fmt.Sprintf("depletion %.1f mm projected to %.1f mm by the end of the next window (%s) with %.1f mm forecast ETc (%s), trigger %.1f mm",
					st.Depletion, proj, next.End.In(z.Loc).Format("2006-01-02 15:04"), etc, forecastLabel(fc, z.Loc), lv.Trigger)
			}
		}
	}
	if rate, how := z.RecentETc(st, now); rate > 0 && !answered {
		if next, ok := SlotAt(z.Windows, z.Loc, NextSlotStart(z.Windows, z.Loc, slot.Start)); ok {
			proj := st.Depletion + rate*next.End.Sub(now).Hours()
			if proj >= lv.Trigger {
				r.Basis, r.ProjectedMM = BasisProjected, round2(proj)
				return r, fmt.Sprintf("depletion %.1f mm projected to %.1f mm by the end of the next window (%s) at %.2f mm/h (%s), trigger %.1f mm",
					st.Depletion, proj, next.End.In(z.Loc).Format("2006-01-02 15:04"), rate, how, lv.Trigger)
			}
		}
	}
	if last != nil && last.Reason.ShortMM > 0 && last.Start.Before(slot.Start) && st.Depletion > lv.Target {
		r.Basis = BasisCarry
		return r, fmt.Sprintf("carries over %.1f mm that run %s could not deliver", last.Reason.ShortMM, last.ID)
	}
	return r, ""
}

// lastRuns indexes, per zone, the latest command that ran, may have run or
// is planned to (cancelled ones and ones that expired unsent never ran; one
// stopped for a hold was interrupted, not completed).
func lastRuns(ledger []Command) map[string]*Command {
	out := map[string]*Command{}
	for i := range ledger {
		c := &ledger[i]
		if c.State == Cancelled || (c.Attempts == 0 && c.State != Planned) || (c.State == Stopped && !c.StopAt.IsZero() && c.StopReason != silentStop) {
			// Never ran, or stopped at the gateway's request (a hold):
			// the zone may be watered again once the hold ends.
			continue
		}
		if p := out[c.Zone]; p == nil || c.Start.After(p.Start) {
			out[c.Zone] = c
		}
	}
	return out
}

// PlanRuns plans the runs that are due at now (the planning part of
// Decide). A zone gets a run when it is due (see the bases of Reason: the
// trigger reached, the trigger projected to be crossed before the next
// window ends, or a short run carried over), no command of it is open or
// may still be running, it has had no run in the current window
// occurrence, no hold applies, and now lies inside one of its windows. The
// run brings the depletion back to the target: net = Dr - target, gross
// minutes = net / efficiency / rate (rounded up), limited to MaxMinutes,
// raised to MinMinutes only when that much water still fits below field
// capacity, split into cycles with soaks, each cycle placed inside the
// current window occurrence (shortened to end with it) and inside the day's
// remaining cap. What the caps or the window leave undelivered is the run's
// ShortMM, watered in the next window.
//
// Sequencing: zones are served most depleted relative to their TAW first
// (ties by zone id). Each cycle starts at the earliest minute at which its
// source stays within its valve and flow limits for the whole cycle, counting
// open commands already in the ledger, commands being stopped (until their
// controller answers), and, until their latest possible end (expiry plus
// minutes), sent commands that expired without a report. A cycle that does
// not fit in the window, or in the day's cap, with at least MinMinutes is
// left for a later decision. After a command expired without any report,
// failed, or was stopped at the controller without a stop asked for, the
// zone is not watered again in the same window occurrence (alerted skip).
func PlanRuns(now time.Time, zones []ZoneInput, sources []Source, ledger []Command, holds Holds) Plan {
	return planRuns(now, zones, sources, ledger, holds, nil)
}

// planRuns is PlanRuns with the site's forecast (nil: none), which each
// zone uses as its ForecastRules say: forecast crop ET for the projected
// basis, forecast rain to shorten or skip a run, forecast frost to hold it.
func planRuns(now time.Time, zones []ZoneInput, sources []Source, ledger []Command, holds Holds, forecast *Forecast) Plan {
	var plan Plan
	open := map[string]bool{}
	var troubled []*Command // expired without report, failed, stopped at the controller
	bySource := map[string][]interval{}
	for i := range ledger {
		c := &ledger[i]
		if (c.State == Expired && !c.Credited && c.Attempts > 0) || c.State == Failed ||
			(c.State == Stopped && (c.StopAt.IsZero() || c.StopReason == silentStop || strings.HasPrefix(c.StopReason, FlowStopPrefix))) {
			troubled = append(troubled, c)
		}
		if c.Stopping() {
			// A stop not yet confirmed: the valve may be open for as long
			// as the controller does not answer.
			open[c.Zone] = true
			start := c.Start
			if !c.StartedAt.IsZero() {
				start = c.StartedAt
			}
			bySource[c.Source] = append(bySource[c.Source], interval{start, farFuture, c.Flow})
			continue
		}
		if c.State == Expired && !c.Credited && c.Attempts > 0 {
			// It may have run with its reports lost (the valve may even
			// still be open): it holds its source until its latest
			// possible end, a start at expiry (or when it was reported
			// started) plus its minutes.
			start := c.Expiry
			if c.StartedAt.After(start) {
				start = c.StartedAt
			}
			if end := start.Add(time.Duration(c.Minutes) * time.Minute); end.After(now) {
				bySource[c.Source] = append(bySource[c.Source], interval{c.Start, end, c.Flow})
			}
			continue
		}
		if !c.State.Open() {
			continue
		}
		open[c.Zone] = true
		start := c.Start
		if c.State == Started && !c.StartedAt.IsZero() {
			start = c.StartedAt
		}
		bySource[c.Source] = append(bySource[c.Source], interval{start, start.Add(time.Duration(c.Minutes) * time.Minute), c.Flow})
	}
	srcs := map[string]Source{}
	for _, s := range sources {
		srcs[s.ID] = s
	}
	last := lastRuns(ledger)

	var cands []candidate
	for _, in := range zones {
		z, st := in.Zone, in.State
		skip := func(reason string, alert bool) { plan.Skips = append(plan.Skips, Skip{z.ID, reason, alert}) }
		if open[z.ID] {
			skip("a command is still open", false)
			continue
		}
		if r, alert := z.Blocked(st, holds, now); r != "" {
			skip(r, alert)
			continue
		}
		lv := z.LevelsAt(st, now)
		slot, inWindow := SlotAt(z.Windows, z.Loc, now)
		if !inWindow {
			if st.Depletion >= lv.Trigger {
				skip("outside watering windows", false)
			}
			continue
		}
		fc := z.forecastFor(forecast, now)
		reason, why := z.due(st, lv, now, slot, last[z.ID], fc)
		if why == "" {
			continue
		}
		if c := troubleIn(troubled, z.ID, slot); c != nil {
			// An expired command may have run with its report lost; a failed
			// one will likely fail again; one the controller stopped without
			// being asked was closed for a reason known only in the field (a
			// flow alarm, a stop pressed on site): do not water again in this
			// window occurrence, and say so.
			skip(fmt.Sprintf("command %s %s in this window", c.ID, c.State), true)
			continue
		}
		if c := last[z.ID]; c != nil && !c.Start.Before(slot.Start) && c.Start.Before(slot.End) {
			continue // one run per window occurrence
		}
		if r := z.forecastFrost(fc, now, slot.End); r != "" {
			skip(r, false)
			continue
		}
		need, fcNote, fcSkip := z.forecastNeed(fc, st, lv, now, slot, st.Depletion-lv.Target)
		if fcSkip != "" {
			skip(fcSkip, false)
			continue
		}
		why += fcNote
		lr := z.Salinity.LeachingRequirement()
		m := GrossMinutes(GrossForLeaching(need, lr), z.System.Efficiency, z.System.Rate)
		deficit := false
		if f := replaceFraction(lv.Stage); f < 1 {
			// Regulated deficit: put back only the stage's share of the
			// crop ET since the last run, in whole minutes rounded down so
			// the share is never exceeded.
			need, deficit = math.Min(need, f*st.EtcSinceRun), true
			m = floorMinutes(GrossForLeaching(need, lr), z.System.Efficiency, z.System.Rate)
		}
		if m > z.System.MaxMinutes {
			m = z.System.MaxMinutes
		}
		if m < z.System.MinMinutes && deficit {
			skip(fmt.Sprintf("deficit stage %s: its share of the crop ET since the last run is below the minimum run", lv.Stage.Name), false)
			continue
		}
		if m < z.System.MinMinutes {
			if NetMM(float64(z.System.MinMinutes), z.System.Rate, z.System.Efficiency) > st.Depletion {
				skip("need below the minimum run", false)
				continue
			}
			m = z.System.MinMinutes
		}
		if lv.Stage != nil {
			reason.Stage = lv.Stage.Name
			why += fmt.Sprintf("; deficit stage %s", lv.Stage.Name)
		}
		why += st.ProbeNote(now, z.Loc)
		if lr > 0 {
			reason.LeachMM = round2(GrossForLeaching(need, lr) - need)
			why += fmt.Sprintf("; leaching fraction %.2f adds %.1f mm", lr, reason.LeachMM)
		}
		plan.Why = append(plan.Why, Skip{Zone: z.ID, Reason: why})
		cands = append(cands, candidate{in, lv, m, need, slot, reason})
	}
	sort.SliceStable(cands, func(i, j int) bool {
		ri := cands[i].in.State.Depletion / cands[i].lv.TAW
		rj := cands[j].in.State.Depletion / cands[j].lv.TAW
		if ri != rj {
			return ri > rj
		}
		return cands[i].in.Zone.ID < cands[j].in.Zone.ID
	})

	used := dayUse(ledger, zoneIndex(zones))
	for _, c := range cands {
		z := c.in.Zone
		src := srcs[z.Source]
		flow := z.Flow()
		if src.MaxFlow > 0 && flow > src.MaxFlow {
			plan.Skips = append(plan.Skips, Skip{z.ID, fmt.Sprintf("zone flow %.0f L/min exceeds source %s limit %.0f", flow, src.ID, src.MaxFlow), true})
			continue
		}
		cycles := SplitCycles(c.minutes, z.System.CycleMinutes)
		earliest := ceilMinute(now.Add(z.Policy.SendLead))
		if earliest.Before(c.slot.Start) {
			earliest = c.slot.Start
		}
		var planned []Command
		for k, m := range cycles {
			start, d, ok := earliestFit(bySource[z.Source], src, earliest, time.Duration(m)*time.Minute,
				time.Duration(z.System.MinMinutes)*time.Minute, flow, c.slot.End)
			if !ok {
				break
			}
			m = int(d / time.Minute)
			key := z.ID + "/" + dayKey(start, z.Loc)
			if rest := z.System.MaxPerDay - used[key]; m > rest {
				if rest < z.System.MinMinutes {
					break
				}
				m = rest
			}
			end := start.Add(time.Duration(m) * time.Minute)
			planned = append(planned, Command{
				ID: CommandID(z.ID, start, k+1), Zone: z.ID, Valve: z.Valve, Source: z.Source,
				Minutes: m, Start: start, Expiry: start.Add(z.Policy.StartTolerance), Cycle: k + 1,
				Reason: c.reason,
				Rate:   z.System.Rate, Efficiency: z.System.Efficiency, Area: z.Area, Flow: flow,
				State: Planned,
			})
			used[key] += m
			bySource[z.Source] = append(bySource[z.Source], interval{start, end, flow})
			earliest = end.Add(time.Duration(z.System.SoakMinutes) * time.Minute)
		}
		if len(planned) == 0 {
			plan.Skips = append(plan.Skips, Skip{z.ID, "no room in the window or the day's cap", false})
			continue
		}
		total := 0
		for _, p := range planned {
			total += p.Minutes
		}
		short := 0.0
		if d := c.need - NetMM(float64(total), z.System.Rate, z.System.Efficiency)*(1-z.Salinity.LeachingRequirement()); d >= 0.05 {
			short = round2(d)
		}
		for i := range planned {
			planned[i].Cycles = len(planned)
			planned[i].Reason.ShortMM = short
		}
		plan.Commands = append(plan.Commands, planned...)
	}
	plan.Commands = enforceCaps(plan.Commands, zones, ledger)
	return plan
}

func troubleIn(troubled []*Command, zone string, slot Slot) *Command {
	for _, c := range troubled {
		if c.Zone == zone && !c.Start.Before(slot.Start) && c.Start.Before(slot.End) {
			return c
		}
	}
	return nil
}

// dayUse sums the minutes charged per zone and standard-time day of the
// planned start ("zone/2006-01-02"), from the ledger.
func dayUse(ledger []Command, byID map[string]*Zone) map[string]int {
	used := map[string]int{}
	for i := range ledger {
		c := &ledger[i]
		if z := byID[c.Zone]; z != nil {
			used[c.Zone+"/"+dayKey(c.Start, z.Loc)] += c.chargedMinutes()
		}
	}
	return used
}

func zoneIndex(zones []ZoneInput) map[string]*Zone {
	byID := map[string]*Zone{}
	for _, in := range zones {
		byID[in.Zone.ID] = in.Zone
	}
	return byID
}

// earliestFit finds the earliest start >= from at which a run of up to d
// (shortened to end by limit, but not below min) with the given flow keeps
// the source within its limits for the whole run. Occupancy only drops when a
// run ends, so the candidates are from and the ends of runs after it.
func earliestFit(busy []interval, src Source, from time.Time, d, min time.Duration, flow float64, limit time.Time) (time.Time, time.Duration, bool) {
	cands := []time.Time{from}
	for _, iv := range busy {
		if iv.end.After(from) {
			cands = append(cands, ceilMinute(iv.end))
		}
	}
	sort.Slice(cands, func(i, j int) bool { return cands[i].Before(cands[j]) })
	for _, s := range cands {
		dd := d
		if room := limit.Sub(s).Truncate(time.Minute); room < dd {
			dd = room
		}
		if dd < min {
			return time.Time{}, 0, false
		}
		if fits(busy, src, s, s.Add(dd), flow) {
			return s, dd, true
		}
	}
	return time.Time{}, 0, false
}

// fits checks the valve count and flow at every moment of [s, e): the load
// only rises where a run starts, so checking s and each start inside is enough.
func fits(busy []interval, src Source, s, e time.Time, flow float64) bool {
	points := []time.Time{s}
	for _, iv := range busy {
		if iv.start.After(s) && iv.start.Before(e) {
			points = append(points, iv.start)
		}
	}
	for _, p := range points {
		n, f := 1, flow
		for _, iv := range busy {
			if !iv.start.After(p) && iv.end.After(p) {
				n++
				f += iv.flow
			}
		}
		if src.MaxValves > 0 && n > src.MaxValves {
			return false
		}
		if src.MaxFlow > 0 && f > src.MaxFlow+1e-9 {
			return false
		}
	}
	return true
}

// enforceCaps is the last line of defence: it drops any new command that
// would break a zone's per-run, per-cycle or per-day cap, whatever happened
// above. It never fires when the planning is right.
func enforceCaps(cmds []Command, zones []ZoneInput, ledger []Command) []Command {
	byID := zoneIndex(zones)
	day := dayUse(ledger, byID)
	event := map[string]int{}
	out := cmds[:0]
	for _, c := range cmds {
		z := byID[c.Zone]
		key := c.Zone + "/" + dayKey(c.Start, z.Loc)
		ok := c.Minutes >= 1 && c.Minutes <= z.System.MaxMinutes &&
			(z.System.CycleMinutes == 0 || c.Minutes <= z.System.CycleMinutes) &&
			event[c.Zone]+c.Minutes <= z.System.MaxMinutes &&
			day[key]+c.Minutes <= z.System.MaxPerDay
		if !ok {
			continue
		}
		event[c.Zone] += c.Minutes
		day[key] += c.Minutes
		out = append(out, c)
	}
	return out
}

func ceilMinute(t time.Time) time.Time {
	r := t.Truncate(time.Minute)
	if r.Before(t) {
		r = r.Add(time.Minute)
	}
	return r
}

func round2(v float64) float64 { return math.Round(v*100) / 100 }

// SendCheck reports why the planned command c must not be sent under the
// zone's current configuration, or "" when it may. Rate, efficiency, area,
// flow, valve and source are copied into a command when it is planned; when
// any of them differs from the zone's now (the configuration changed, e.g.
// across a restart) the command is stale. Otherwise the zone's caps are
// checked again as they stand now: minutes per cycle and per run (with the
// earlier cycles of the same run) and per standard-time day, counting the
// ledger except commands of the zone planned to start after c (they are
// checked when they are due).
func (z *Zone) SendCheck(c *Command, ledger []Command) string {
	if c.Valve != z.Valve || c.Source != z.Source || c.Rate != z.System.Rate ||
		c.Efficiency != z.System.Efficiency || c.Area != z.Area || c.Flow != z.Flow() {
		return "zone configuration changed since the command was planned"
	}
	s := z.System
	if c.Minutes > s.MaxMinutes || (s.CycleMinutes > 0 && c.Minutes > s.CycleMinutes) {
		return fmt.Sprintf("%d minutes exceed the zone's caps (max_minutes %d, cycle_minutes %d)", c.Minutes, s.MaxMinutes, s.CycleMinutes)
	}
	day := dayKey(c.Start, z.Loc)
	used := 0
	for i := range ledger {
		o := &ledger[i]
		if o.Zone != z.ID || o.ID == c.ID || (o.State == Planned && !o.Start.Before(c.Start)) {
			continue
		}
		if dayKey(o.Start, z.Loc) == day {
			used += o.chargedMinutes()
		}
	}
	if used+c.Minutes > s.MaxPerDay {
		return fmt.Sprintf("%d minutes with %d already charged on %s exceed max_minutes_per_day %d", c.Minutes, used, day, s.MaxPerDay)
	}
	// The earlier cycles of the same run: for each, the latest command of
	// the zone with that cycle number and cycle count before the next one.
	event, next := c.Minutes, c
	for k := c.Cycle - 1; k >= 1; k-- {
		var prev *Command
		for i := range ledger {
			o := &ledger[i]
			if o.Zone == z.ID && o.Cycles == c.Cycles && o.Cycle == k && o.Start.Before(next.Start) &&
				(prev == nil || o.Start.After(prev.Start)) {
				prev = o
			}
		}
		if prev == nil {
			break
		}
		event += prev.chargedMinutes()
		next = prev
	}
	if event > s.MaxMinutes {
		return fmt.Sprintf("run of %d minutes over its cycles exceeds max_minutes %d", event, s.MaxMinutes)
	}
	return ""
}
