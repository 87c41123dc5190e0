package controllers

import (
	"fmt"
	"math"
	"strings"
	"time"
)

// CommandState is where a command is in its life.
type CommandState string

// The command states. Planned -> Sent -> Accepted -> Started -> Finished or
// Failed; Sent/Accepted/Started -> Expired when reports stop; Planned ->
// Cancelled when a hold arrives before it is sent; Sent/Accepted/Started ->
// Stopped when the controller confirms it closed the valve early (after a
// stop, see RequestStop, or on its own).
const (
	Planned   CommandState = "planned"
	Sent      CommandState = "sent"
	Accepted  CommandState = "accepted"
	Started   CommandState = "started"
	Finished  CommandState = "finished"
	Failed    CommandState = "failed"
	Expired   CommandState = "expired"
	Cancelled CommandState = "cancelled"
	Stopped   CommandState = "stopped"
)

// ReportClockSkew is how far a valve controller's clock may differ from the
// gateway's: a report up to this long before a command's start is taken as
// at the start, and a reported run may exceed the time since the start by
// this much. Common practice, no source (controllers on NTP stay within
// seconds; two minutes covers one that resynchronises rarely).
const ReportClockSkew = 2 * time.Minute

// Open reports whether the command may still run or report (not yet
// finished, failed, expired, cancelled or stopped).
func (s CommandState) Open() bool {
	return s == Planned || s == Sent || s == Accepted || s == Started
}

// CommandPolicy is the timing of commands and retries.
type CommandPolicy struct {
	SendLead       time.Duration // publish this long before the planned start
	AckTimeout     time.Duration // re-send when no report came this long after sending
	MaxAttempts    int           // sends per command, first one included
	StartTolerance time.Duration // a controller must not start later than planned start + this (the command's expiry)
	FinishGrace    time.Duration // wait this long past the planned end for the finished report
	// OverrunMargin is the share by which a reported run (minutes or
	// metered volume) may exceed the commanded one before it is an overrun:
	// alerted, and credited only up to the commanded water plus this share.
	OverrunMargin float64
}

// DefaultPolicy is the policy used when none is configured.
var DefaultPolicy = CommandPolicy{
	SendLead:       time.Minute,
	AckTimeout:     2 * time.Minute,
	MaxAttempts:    3,
	StartTolerance: 15 * time.Minute,
	FinishGrace:    15 * time.Minute,
	OverrunMargin:  0.10,
}

// Validate reports an impossible policy.
func (p CommandPolicy) Validate() error {
	if p.SendLead < 0 || p.AckTimeout <= 0 || p.MaxAttempts < 1 || p.MaxAttempts > MaxCommandAttempts || p.StartTolerance <= 0 || p.FinishGrace < 0 ||
		!(p.OverrunMargin >= 0 && p.OverrunMargin <= MaxOverrunMargin) {
		return fmt.Errorf("command policy: need send lead >= 0, ack timeout > 0, 1-%d attempts, start tolerance > 0, finish grace >= 0, overrun margin 0-%g, got %+v: %w", MaxCommandAttempts, MaxOverrunMargin, p, ErrInput)
	}
	return nil
}

// Basis names the rule that made a zone due for water.
type Basis string

// The bases of a run.
const (
	BasisTrigger   Basis = "trigger"   // the depletion has reached the trigger
	BasisProjected Basis = "projected" // it would cross the trigger before the next window ends
	BasisCarry     Basis = "carry"     // the previous run was cut short by a cap or the window end
)

// Reason says why a command was planned.
type Reason struct {
	DepletionMM    float64 `json:"depletion_mm"`
	TriggerMM      float64 `json:"trigger_mm"`
	EtcSinceLastMM float64 `json:"etc_since_last_mm"`
	// Basis is the rule that made the zone due; ProjectedMM the depletion
	// projected to the end of the next window (BasisProjected).
	Basis       Basis   `json:"basis,omitempty"`
	ProjectedMM float64 `json:"projected_mm,omitempty"`
	// ShortMM is the net water the run needed but could not deliver (cut by
	// a cap or the window's end): the next window waters it.
	ShortMM float64 `json:"short_mm,omitempty"`
	// Stage is the deficit stage the run was planned in, if any.
	Stage string `json:"stage,omitempty"`
	// LeachMM is the net water added to the run for the leaching
	// requirement (FAO-29), mm.
	LeachMM float64 `json:"leach_mm,omitempty"`
}

// Command is one valve run and its ledger entry. Rate, Efficiency and Area
// are copied from the zone when planned, so a later configuration change does
// not change how its reported water is credited.
type Command struct {
	ID      string    `json:"id"`
	Zone    string    `json:"zone"`
	Valve   string    `json:"valve"`
	Source  string    `json:"source,omitempty"`
	Minutes int       `json:"minutes"`
	Start   time.Time `json:"start"`  // planned start
	Expiry  time.Time `json:"expiry"` // latest start the controller may make
	Cycle   int       `json:"cycle"`  // 1-based
	Cycles  int       `json:"cycles"`
	Reason  Reason    `json:"reason"`

	Rate       float64 `json:"rate_mm_h"`
	Efficiency float64 `json:"efficiency"`
	Area       float64 `json:"area_m2"`
	Flow       float64 `json:"flow_l_min"`

	State      CommandState `json:"state"`
	Attempts   int          `json:"attempts"`
	SentAt     time.Time    `json:"sent_at,omitzero"`
	StartedAt  time.Time    `json:"started_at,omitzero"`
	EndedAt    time.Time    `json:"ended_at,omitzero"`
	MinutesRun float64      `json:"minutes_run"`
	RunKnown   bool         `json:"run_known"` // a report gave minutes_run
	VolumeL    float64      `json:"volume_l"`
	CreditMM   float64      `json:"credit_mm"`
	Credited   bool         `json:"credited"`
	Note       string       `json:"note,omitempty"`

	// A stop asked for while the command was sent, accepted or started
	// (RequestStop): when, why, and how often the stop was published.
	StopAt       time.Time `json:"stop_at,omitzero"`
	StopReason   string    `json:"stop_reason,omitempty"`
	StopAttempts int       `json:"stop_attempts,omitempty"`
	StopSentAt   time.Time `json:"stop_sent_at,omitzero"`
}

// CommandID derives a command's id from its zone, planned start and cycle, so
// that planning the same run again (e.g. after a restart) gives the same id.
func CommandID(zone string, start time.Time, cycle int) string {
	return fmt.Sprintf("%s-%s-c%d", zone, start.UTC().Format("20060102T1504Z"), cycle)
}

// ReportState is the state a valve controller reports.
type ReportState string

// The report states.
const (
	ReportAccepted ReportState = "accepted"
	ReportStarted  ReportState = "started"
	ReportFinished ReportState = "finished"
	ReportFailed   ReportState = "failed"
	ReportStopped  ReportState = "stopped" // the valve was closed before its minutes had run
)

// Report is a valve controller's report about one command.
type Report struct {
	ID         string
	State      ReportState
	MinutesRun float64 // when HasMinutes
	HasMinutes bool
	VolumeL    float64 // flow-meter volume, litres, when HasVolume
	HasVolume  bool
	Reason     string
}

// Validate checks the report's fields.
func (r Report) Validate() error {
	switch r.State {
	case ReportAccepted, ReportStarted, ReportFinished, ReportFailed, ReportStopped:
	default:
		return fmt.Errorf("report %s: state: unknown %q: %w", r.ID, r.State, ErrInput)
	}
	if r.ID == "" {
		return fmt.Errorf("report: id: empty: %w", ErrInput)
	}
	if r.HasMinutes && !(r.MinutesRun >= 0 && r.MinutesRun <= 1440) {
		return fmt.Errorf("report %s: minutes_run: must be within 0-1440, got %v: %w", r.ID, r.MinutesRun, ErrInput)
	}
	if r.HasVolume && !(r.VolumeL >= 0 && !math.IsInf(r.VolumeL, 0)) {
		return fmt.Errorf("report %s: volume_l: must be >= 0, got %v: %w", r.ID, r.VolumeL, ErrInput)
	}
	return nil
}

// Outcome is what applying a report did.
type Outcome struct {
	Changed   bool    // the command's state changed
	Duplicate bool    // the report repeated what was already known
	Credit    bool    // water is to be credited to the zone now
	CreditMM  float64 // net depth to credit, mm
	Late      bool    // the report arrived after the command had expired
	// Overrun names both figures when the report claims more minutes or
	// volume than the command plus the policy's margin; the credit is then
	// capped at the commanded water plus the margin.
	Overrun string
}

// CreditFor returns the net depth a report credits, mm. Only the water that
// reaches the root zone counts, so the application efficiency applies to
// both forms: volume / area x efficiency with a flow-meter volume, else
// minutes_run / 60 x rate x efficiency. A finished report without either is
// taken to have run the commanded minutes; a failed one without either
// credits nothing. A stopped one without either is handled by Apply (it
// needs the report's arrival time); CreditFor credits nothing for it.
func (c *Command) CreditFor(r Report) float64 {
	switch {
	case r.HasVolume:
		return r.VolumeL / c.Area * c.Efficiency
	case r.HasMinutes:
		return NetMM(r.MinutesRun, c.Rate, c.Efficiency)
	case r.State == ReportFinished:
		return NetMM(float64(c.Minutes), c.Rate, c.Efficiency)
	}
	return 0
}

// stoppedMinutes estimates the minutes a command ran when a stopped report
// at now names neither minutes nor volume: the time since the started report
// arrived, at most the commanded minutes; nothing when no started report
// came (the valve most likely never opened). Estimating from the arrival
// times is common practice, no source; the note says it was used.
func (c *Command) stoppedMinutes(now time.Time) float64 {
	if c.StartedAt.IsZero() || !now.After(c.StartedAt) {
		return 0
	}
	return math.Min(now.Sub(c.StartedAt).Minutes(), float64(c.Minutes))
}

// commandedFlow is the command's flow, L/min.
func (c *Command) commandedFlow() float64 {
	if c.Flow > 0 {
		return c.Flow
	}
	return c.Rate * c.Area / 60
}

// overrun checks a final report against the commanded run plus margin m and
// returns the figures when it claims more, else "".
func (c *Command) overrun(r Report, m float64) string {
	var out []string
	limit := float64(c.Minutes) * (1 + m)
	if r.HasMinutes && r.MinutesRun > limit+1e-9 {
		out = append(out, fmt.Sprintf("reported %.1f min run for a %d min command (limit %.1f min with a %.0f %% margin)",
			r.MinutesRun, c.Minutes, limit, m*100))
	}
	if vol := float64(c.Minutes) * c.commandedFlow(); r.HasVolume && r.VolumeL > vol*(1+m)+1e-9 {
		out = append(out, fmt.Sprintf("reported volume %.0f L for a %d min command of about %.0f L (limit %.0f L with a %.0f %% margin)",
			r.VolumeL, c.Minutes, vol, vol*(1+m), m*100))
	}
	return strings.Join(out, "; ")
}

// checkTiming refuses a report that cannot be true at now under policy p.
// A controller runs a command from its start, so: a started report comes no
// earlier than the start less ReportClockSkew; a finished report, or a
// failed or stopped one that claims water, no earlier than the start; a
// stopped report before the start only answers a stop the gateway asked for;
// and the run a final report claims (minutes_run; else volume_l at the
// commanded flow plus p.OverrunMargin; else, when finished, the commanded
// minutes) fits in the time since the start plus ReportClockSkew. The
// refusal changes nothing, so the true report that comes later is applied.
func (c *Command) checkTiming(r Report, now time.Time, p CommandPolicy) error {
	refuse := func(why string) error {
		return fmt.Errorf("report %s: state %s arrived at %s, %s (command start %s); check the controller's clock, and who else may publish on its report topic: %w",
			r.ID, r.State, now.UTC().Format(time.RFC3339), why, c.Start.UTC().Format(time.RFC3339), ErrInput)
	}
	claims := r.HasMinutes && r.MinutesRun > 0 || r.HasVolume && r.VolumeL > 0
	early := now.Before(c.Start)
	switch r.State {
	case ReportAccepted:
		return nil
	case ReportStarted:
		if now.Before(c.Start.Add(-ReportClockSkew)) {
			return refuse("before the command's start: a controller runs a command from its start")
		}
		return nil
	case ReportFinished:
		if early {
			return refuse("before the command's start: no run can have finished")
		}
	case ReportFailed:
		if early && claims {
			return refuse("before the command's start, claiming water no run can have given")
		}
	case ReportStopped:
		switch {
		case early && c.StopAt.IsZero():
			return refuse("before the command's start, and no stop was asked for")
		case early && claims:
			return refuse("before the command's start, claiming water no run can have given")
		}
	}
	elapsed := max(0, now.Sub(c.Start.Add(-ReportClockSkew)).Minutes())
	switch {
	case r.HasMinutes:
		if r.MinutesRun > elapsed+1e-9 {
			return refuse(fmt.Sprintf("minutes_run %.1f longer than the %.1f min since the command's start (%s allowed for clock differences)",
				r.MinutesRun, elapsed, ReportClockSkew))
		}
	case r.HasVolume:
		if most := c.commandedFlow() * (1 + p.OverrunMargin) * elapsed; r.VolumeL > most+1e-9 {
			return refuse(fmt.Sprintf("volume_l %.0f more than the commanded flow plus margin gives in the %.1f min since the command's start (%.0f L)",
				r.VolumeL, elapsed, most))
		}
	case r.State == ReportFinished:
		if float64(c.Minutes) > elapsed+1e-9 {
			return refuse(fmt.Sprintf("finished without minutes_run or volume_l (taken as the commanded %d min), but only %.1f min since the command's start",
				c.Minutes, elapsed))
		}
	}
	return nil
}

// Apply applies a report received at now under policy p. Reports are
// idempotent: a duplicate, or one older than the known state, changes
// nothing; water is credited once, on the first finished, failed or stopped
// report, even when it comes after the command expired (the water did run;
// the report is late, not wrong). Reports for a command never sent
// (planned, cancelled, or expired unsent) are refused. A final report that
// claims more than the command plus p.OverrunMargin is an overrun: its
// figures are kept and named in the outcome, and the credit is capped at
// the commanded water plus the margin (a broken or forged meter must not
// empty the balance). A report that cannot be true at now (see checkTiming)
// is refused without changing the command.
func (c *Command) Apply(r Report, now time.Time, p CommandPolicy) (Outcome, error) {
	if err := r.Validate(); err != nil {
		return Outcome{}, err
	}
	if r.ID != c.ID {
		return Outcome{}, fmt.Errorf("report %s: for command %s: %w", r.ID, c.ID, ErrInput)
	}
	switch c.State {
	case Finished, Failed, Stopped:
		return Outcome{Duplicate: true}, nil
	case Cancelled:
		return Outcome{}, fmt.Errorf("report %s: command was cancelled before it was sent: %w", r.ID, ErrInput)
	}
	if c.Attempts == 0 {
		// Planned, or expired unsent: no controller can know of this run.
		return Outcome{}, fmt.Errorf("report %s: command was never sent: %w", r.ID, ErrInput)
	}
	if err := c.checkTiming(r, now, p); err != nil {
		return Outcome{}, err
	}
	rank := map[CommandState]int{Planned: 0, Sent: 1, Accepted: 2, Started: 3}
	switch r.State {
	case ReportAccepted, ReportStarted:
		next := Accepted
		if r.State == ReportStarted {
			next = Started
		}
		if c.State == Expired || rank[c.State] >= rank[next] {
			return Outcome{Duplicate: true}, nil
		}
		c.State = next
		if next == Started {
			c.StartedAt = now
		}
		return Outcome{Changed: true}, nil
	}
	late := c.State == Expired
	estimated := 0.0
	if r.State == ReportStopped && !r.HasMinutes && !r.HasVolume {
		estimated = c.stoppedMinutes(now) // before StartedAt and the state change below
	}
	switch r.State {
	case ReportFinished:
		c.State = Finished
	case ReportStopped:
		c.State = Stopped
	default:
		c.State = Failed
	}
	c.EndedAt = now
	c.MinutesRun, c.VolumeL = r.MinutesRun, r.VolumeL
	c.RunKnown = r.HasMinutes
	if !r.HasMinutes && r.State == ReportFinished && !r.HasVolume {
		c.MinutesRun = float64(c.Minutes)
	}
	if r.Reason != "" {
		c.Note = r.Reason
	}
	mm := c.CreditFor(r)
	if r.State == ReportStopped && !r.HasMinutes && !r.HasVolume {
		c.MinutesRun = estimated
		mm = NetMM(estimated, c.Rate, c.Efficiency)
		c.Note = strings.TrimPrefix(c.Note+"; minutes estimated from the started and stopped report times", "; ")
	}
	over := c.overrun(r, p.OverrunMargin)
	if limit := NetMM(float64(c.Minutes)*(1+p.OverrunMargin), c.Rate, c.Efficiency); mm > limit {
		mm = limit
		if over == "" {
			over = fmt.Sprintf("credit %.2f mm capped at the commanded water plus margin", c.CreditFor(r))
		}
	}
	if over != "" {
		c.Note = strings.TrimPrefix(c.Note+"; overrun: "+over, "; ")
	}
	c.CreditMM = mm
	c.Credited = true
	return Outcome{Changed: true, Credit: true, CreditMM: mm, Late: late, Overrun: over}, nil
}

// Todo is what the scheduler must do with a command now.
type Todo int

// The things to do.
const (
	None       Todo = iota
	Send            // publish (first attempt or a retry) and MarkSent
	Expire          // no report came before expiry: MarkExpired and alert (it may have run)
	SendStop        // publish the stop (first attempt or a retry) and MarkStopSent
	StopSilent      // the latest possible end passed without a final report: RequestStop, then send it
)

// maxStopInterval bounds the pause between repeated stops to a controller
// that does not answer. Common practice, no source.
const maxStopInterval = 30 * time.Minute

// stopInterval is the pause after the n-th stop: the ack timeout for the
// policy's usual attempts, then doubling up to maxStopInterval.
func stopInterval(n int, p CommandPolicy) time.Duration {
	d := p.AckTimeout
	for i := p.MaxAttempts; i <= n && d < maxStopInterval; i++ {
		d *= 2
	}
	return min(d, maxStopInterval)
}

// MayRun reports whether the valve of the command may be open or still
// open: it was sent and no final report (finished, failed, stopped) has
// come, including a sent command that expired without any report.
func (c *Command) MayRun() bool {
	switch c.State {
	case Sent, Accepted, Started, Expired:
		return c.Attempts > 0
	}
	return false
}

// Stopping reports whether a stop was asked for and no final report has
// come yet.
func (c *Command) Stopping() bool { return !c.StopAt.IsZero() && c.MayRun() }

// RequestStop asks for the valve of a command that may be running (sent,
// accepted, started, or expired after being sent) to be closed now; the
// scheduler then publishes stops instead of the command (see Due) until a
// final report arrives. Planned commands are cancelled instead (Cancel). It
// reports whether the command changed: asking again for a stop already
// asked for changes nothing.
func (c *Command) RequestStop(now time.Time, reason string) (bool, error) {
	if !c.MayRun() {
		return false, fmt.Errorf("stop %s: state is %s, only commands sent and not finished can be stopped: %w", c.ID, c.State, ErrInput)
	}
	if !c.StopAt.IsZero() {
		return false, nil
	}
	c.StopAt, c.StopReason = now, reason
	return true, nil
}

// MarkStopSent records a (re-)send of the stop at now.
func (c *Command) MarkStopSent(now time.Time) {
	c.StopAttempts++
	c.StopSentAt = now
}

// Due returns what to do with the command at now under policy p. A command
// being stopped is never sent again: its stop is repeated until a final
// report arrives, AckTimeout apart for the usual MaxAttempts, then less
// often (see stopInterval). A command that may be running when its latest
// possible end has passed (sent or started, without a final report) is
// stopped (StopSilent).
func (c *Command) Due(now time.Time, p CommandPolicy) Todo {
	if c.Stopping() {
		if c.StopAttempts == 0 || !now.Before(c.StopSentAt.Add(stopInterval(c.StopAttempts, p))) {
			return SendStop
		}
		return None
	}
	switch c.State {
	case Planned:
		if !now.Before(c.Expiry) {
			return Expire
		}
		if !now.Before(c.Start.Add(-p.SendLead)) {
			return Send
		}
	case Sent:
		if !now.Before(c.Expiry) {
			return Expire
		}
		if c.Attempts < p.MaxAttempts && !now.Before(c.SentAt.Add(p.AckTimeout)) {
			return Send
		}
	case Accepted, Started:
		if !now.Before(c.finishDeadline(p)) {
			return StopSilent
		}
	case Expired:
		if c.Attempts > 0 && !now.Before(c.finishDeadline(p)) {
			return StopSilent
		}
	}
	return None
}

// NextWake returns when Due may next return an action (zero: never).
func (c *Command) NextWake(p CommandPolicy) time.Time {
	if c.Stopping() {
		if c.StopAttempts == 0 {
			return c.StopAt
		}
		return c.StopSentAt.Add(stopInterval(c.StopAttempts, p))
	}
	switch c.State {
	case Planned:
		return c.Start.Add(-p.SendLead)
	case Sent:
		if c.Attempts < p.MaxAttempts {
			if t := c.SentAt.Add(p.AckTimeout); t.Before(c.Expiry) {
				return t
			}
		}
		return c.Expiry
	case Accepted, Started:
		return c.finishDeadline(p)
	case Expired:
		if c.Attempts > 0 {
			return c.finishDeadline(p)
		}
	}
	return time.Time{}
}

// finishDeadline is the latest possible end of the run plus the finish
// grace: from the started report when one came, else from the expiry (the
// latest start a controller may make).
func (c *Command) finishDeadline(p CommandPolicy) time.Time {
	run := time.Duration(c.Minutes) * time.Minute
	if !c.StartedAt.IsZero() {
		return c.StartedAt.Add(run + p.FinishGrace)
	}
	return c.Expiry.Add(run + p.FinishGrace)
}

// MarkSent records a (re-)send at now.
func (c *Command) MarkSent(now time.Time) {
	if c.State == Planned {
		c.State = Sent
	}
	c.Attempts++
	c.SentAt = now
}

// MarkExpired records that no (further) report is expected. The command is
// never credited unless a late finished or failed report arrives.
func (c *Command) MarkExpired(now time.Time, note string) {
	c.State = Expired
	c.EndedAt = now
	c.Note = note
}

// Cancel withdraws a planned command before it is sent.
func (c *Command) Cancel(now time.Time, note string) error {
	if c.State != Planned {
		return fmt.Errorf("cancel %s: state is %s, only planned commands can be cancelled: %w", c.ID, c.State, ErrInput)
	}
	c.State = Cancelled
	c.EndedAt = now
	c.Note = note
	return nil
}

// chargedMinutes is what a command counts against its zone's daily cap:
// everything that may have run counts in full (an expired command may have
// run with its report lost), a failed or stopped one counts what it
// reported (in full when it reported no minutes), a cancelled one, or one
// that expired without ever being sent, nothing.
func (c *Command) chargedMinutes() int {
	switch c.State {
	case Cancelled:
		return 0
	case Expired:
		if c.Attempts == 0 {
			return 0
		}
	case Failed, Stopped:
		if c.RunKnown {
			return int(math.Ceil(c.MinutesRun - 1e-9))
		}
	case Finished:
		if c.RunKnown && c.MinutesRun > float64(c.Minutes) {
			return int(math.Ceil(c.MinutesRun - 1e-9))
		}
	}
	return c.Minutes
}
