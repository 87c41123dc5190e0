package zones

import (
	"bufio"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"sync"
	"text/tabwriter"
	"time"

	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
	"etpulse/hourly"
)

// Backtest runs the zones offline over recorded hours (etpulse replay): the
// same balance, the same decision function at the same moments as the live
// gateway, and the same ledger, with every valve running what it is sent
// and reporting it (started at its start, finished at its end, stopped when
// a stop reaches it). An hour is decided on when the live gateway would
// close it, at its end plus the station's close_grace: every scheduler pass
// before that moment runs without the hour's ET. It collects one row per
// zone and standard-time day, and season totals, counting only water that
// ran; cancelled cycles are counted apart.
type Backtest struct {
	svc   *Service
	clock *backtestClock
	grace map[[2]string]time.Duration // site/station -> close_grace

	mu       sync.Mutex
	last     time.Time // scheduler time reached
	nextTick time.Time
	finishes []finish
	days     map[string]*DayRow // zone/day
	order    []string
	totals   map[string]*ZoneTotals
}

type finish struct {
	at  time.Time
	ref *zoneRef
	r   controllers.Report
}

type backtestClock struct {
	mu  sync.Mutex
	now time.Time
}

func (c *backtestClock) Now() time.Time { c.mu.Lock(); defer c.mu.Unlock(); return c.now }
func (c *backtestClock) set(t time.Time) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.now = t
}

// DayRow is one zone's standard-time day in a backtest.
type DayRow struct {
	Site, Zone, Day  string
	ETc              float64 // mm
	Rain             float64 // measured, mm
	EffRain          float64 // mm
	Runs             int     // commands (cycles count one each) that ran: reported with minutes run > 0
	Minutes          float64 // minutes run, as reported
	GrossMM          float64 // minutes run x rate
	CreditedMM       float64 // net irrigation credited
	Cancelled        int     // planned cycles withdrawn before they were sent (hold, weather, changed configuration)
	CancelledMinutes int
	Drainage         float64 // mm
	Depletion        float64 // at the end of the day, mm
	StressHours      int     // hours with Ks < 1
	// IntendedStressHours are the stress hours inside a deficit stage
	// (counted in StressHours too): the stress the grower asked for.
	IntendedStressHours int
	ETcPot              float64 // Kc ETo without water stress, mm
	Leach               float64 // leaching fraction of the credited water (in Drainage), mm
	FallbackHours       int
	MissingHours        int
}

// ZoneTotals are a zone's totals over a backtest.
type ZoneTotals struct {
	Site, Zone                    string
	Days                          int
	ETc, Rain, EffRain            float64
	Runs                          int
	Minutes                       float64
	GrossMM, CreditedMM, Drainage float64
	Cancelled, CancelledMinutes   int
	StartDepletion, EndDepletion  float64
	StressHours, FallbackHours    int
	MissingHours                  int
	// IntendedStressHours are the stress hours inside deficit stages;
	// ETcPot the unstressed crop ET; Leach the leaching water, mm.
	IntendedStressHours int
	ETcPot, Leach       float64
}

// NewBacktest builds the zones of cfg on db, a scratch state file of its
// own (not the pipeline's). pts, when set, receives the step, command and
// report points like the live gateway's outbox.
func NewBacktest(cfg *config.Config, db *bbolt.DB, pts store.Enqueuer) (*Backtest, error) {
	b := &Backtest{clock: &backtestClock{}, grace: map[[2]string]time.Duration{}, days: map[string]*DayRow{}, totals: map[string]*ZoneTotals{}}
	for i := range cfg.Sites {
		for j := range cfg.Sites[i].Stations {
			st := &cfg.Sites[i].Stations[j]
			b.grace[[2]string{cfg.Sites[i].ID, st.ID}] = st.CloseGrace.D()
		}
	}
	svc, err := New(Options{Config: cfg, DB: db, Store: pts, Clock: clock.Func(b.clock.Now), OnEvent: b.event})
	if err != nil {
		return nil, fmt.Errorf("new backtest: %w", err)
	}
	b.svc = svc
	sts, err := svc.Status(time.Time{})
	if err != nil {
		return nil, fmt.Errorf("new backtest: %w", err)
	}
	for _, st := range sts {
		b.totals[st.Site+"/"+st.Zone] = &ZoneTotals{Site: st.Site, Zone: st.Zone, StartDepletion: st.State.Depletion, EndDepletion: st.State.Depletion}
	}
	return b, nil
}

// HandleHour is an HourHandler for the replay's pipeline: it steps the
// zones in the backtest's own state file (the pipeline's transaction tx is
// not used) at the moment the live gateway would close the hour (its end
// plus the station's close_grace, or the scheduler time already reached for
// a later revision), after running the scheduler up to that moment, and
// then runs the scheduler pass the closed hour triggers. With several
// stations driving zones the readings should be sorted by time: the
// scheduler's clock only moves forward.
func (b *Backtest) HandleHour(_ *bbolt.Tx, rec hourly.Record) error {
	at := rec.End.Add(b.grace[[2]string{rec.Site, rec.Station}])
	if err := b.Advance(at); err != nil {
		return err
	}
	at = b.clock.Now()
	if err := b.svc.o.DB.Update(func(tx *bbolt.Tx) error { return b.svc.HandleHour(tx, rec) }); err != nil {
		return fmt.Errorf("backtest: %w", err)
	}
	b.mu.Lock()
	b.nextTick = at // the live service wakes at once when an hour closes
	b.mu.Unlock()
	return b.Advance(at)
}

// Hold applies a hold request (the JSON of the hold topic) to site at at,
// after running the scheduler up to then, and runs the pass the live
// service runs when a hold arrives.
func (b *Backtest) Hold(site string, payload []byte, at time.Time) (HoldReply, error) {
	var sr *siteRef
	for _, x := range b.svc.sites {
		if x.id == site {
			sr = x
		}
	}
	if sr == nil {
		return HoldReply{}, fmt.Errorf("backtest hold: no site %q with zones", site)
	}
	var reply HoldReply
	err := b.inject(at, true, func(now time.Time) error {
		reply = b.svc.applyHold(sr, payload, now)
		return nil
	})
	return reply, err
}

// ObserveSample passes a replayed station reading to the zones as the live
// gateway's pipeline does (pipeline.SampleObserver): a probe channel's
// reading is kept for its zone's next hour step and fused there.
func (b *Backtest) ObserveSample(site, station string, smp hourly.Sample, now time.Time) {
	b.svc.ObserveSample(site, station, smp, now)
}

// Meter applies a reading of meter (of site) at at, after running the
// scheduler up to then, as the meter's topic handler does live: a flow
// rate in L/min (isFlow) or a running volume in litres. When the meter's
// condition changes the scheduler pass the live service would be woken
// for runs at once.
func (b *Backtest) Meter(site, meter string, v float64, isFlow bool, at time.Time) error {
	var mr *meterRef
	for _, x := range b.svc.meters[site] {
		if x.m.ID == meter {
			mr = x
		}
	}
	if mr == nil {
		return fmt.Errorf("backtest meter: no meter %q at site %q", meter, site)
	}
	return b.inject(at, false, func(now time.Time) error {
		if err := b.svc.applyMeter(mr, v, isFlow, now); err != nil {
			return fmt.Errorf("backtest meter %s: %w", meter, err)
		}
		return nil
	})
}

// Forecast makes f the latest forecast of site at at (the forecast topic's
// message arriving), after running the scheduler up to then, and runs the
// pass the live service runs when a forecast arrives.
func (b *Backtest) Forecast(site string, f *controllers.Forecast, at time.Time) error {
	return b.inject(at, true, func(time.Time) error {
		b.svc.SetForecast(site, f)
		return nil
	})
}

// inject runs the scheduler up to at, applies an input at the time reached
// and then runs the pass it triggers: always when pass is set, else when
// the input woke the service (its wake channel, as live).
func (b *Backtest) inject(at time.Time, pass bool, apply func(now time.Time) error) error {
	if err := b.Advance(at); err != nil {
		return err
	}
	now := b.clock.Now()
	if err := apply(now); err != nil {
		return err
	}
	select {
	case <-b.svc.wake:
		pass = true
	default:
	}
	if !pass {
		return nil
	}
	b.mu.Lock()
	b.nextTick = now
	b.mu.Unlock()
	return b.Advance(now)
}

// Advance runs the scheduler up to t: its passes and the simulated valve
// reports, in time order.
func (b *Backtest) Advance(t time.Time) error {
	for {
		b.mu.Lock()
		at := b.nextTick
		if at.IsZero() {
			at = t
		}
		var fin *finish
		if len(b.finishes) > 0 && !b.finishes[0].at.After(at) {
			at = b.finishes[0].at
			if !at.After(t) {
				f := b.finishes[0]
				b.finishes = b.finishes[1:]
				fin = &f
			}
		}
		b.mu.Unlock()
		if at.After(t) {
			break
		}
		if at.Before(b.last) {
			at = b.last
		}
		b.clock.set(at)
		b.last = at
		if fin != nil {
			if err := b.svc.applyReport(fin.ref, fin.r, at); err != nil {
				return fmt.Errorf("backtest: %w", err)
			}
		}
		next, sends, err := b.svc.tick(at)
		if err != nil {
			return fmt.Errorf("backtest: %w", err)
		}
		b.mu.Lock()
		b.nextTick = next
		for _, o := range sends {
			b.valve(o, at)
		}
		sort.SliceStable(b.finishes, func(i, j int) bool { return b.finishes[i].at.Before(b.finishes[j].at) })
		b.mu.Unlock()
	}
	b.clock.set(t)
	if t.After(b.last) {
		b.last = t
	}
	return nil
}

// valve simulates the controller receiving o at at: a first send runs the
// valve (started at its start, finished at its end); a stop closes it now
// and reports the minutes it ran. Re-sends are answered by the reports
// already scheduled. Called with b.mu held.
func (b *Backtest) valve(o outgoing, at time.Time) {
	ref := b.svc.zones[b.svc.siteOf(o.cmd.Zone)+"/"+o.cmd.Zone]
	if ref == nil {
		return
	}
	c := o.cmd
	if o.stop {
		pending, started := false, true
		kept := b.finishes[:0]
		for _, f := range b.finishes {
			if f.r.ID == c.ID {
				pending = true
				started = started && f.r.State != controllers.ReportStarted
				continue
			}
			kept = append(kept, f)
		}
		b.finishes = kept
		if !pending {
			return // already finished: its report answers the stop
		}
		ran := 0.0
		if begin := c.StartedAt; started && !begin.IsZero() && at.After(begin) {
			ran = at.Sub(begin).Minutes()
		}
		b.finishes = append(b.finishes, finish{at: at, ref: ref, r: controllers.Report{ID: c.ID, State: controllers.ReportStopped, MinutesRun: ran, HasMinutes: true, Reason: "stop received"}})
		return
	}
	if !o.first {
		return
	}
	start := c.Start
	if start.Before(at) {
		start = at
	}
	m := float64(c.Minutes)
	b.finishes = append(b.finishes,
		finish{at: start, ref: ref, r: controllers.Report{ID: c.ID, State: controllers.ReportStarted}},
		finish{at: start.Add(time.Duration(c.Minutes) * time.Minute), ref: ref, r: controllers.Report{ID: c.ID, State: controllers.ReportFinished, MinutesRun: m, HasMinutes: true}})
}

func (b *Backtest) row(site, zone string, t time.Time) *DayRow {
	ref := b.svc.zones[site+"/"+zone]
	day := t.In(ref.z.Loc).Format("2006-01-02")
	k := site + "/" + zone + "/" + day
	r := b.days[k]
	if r == nil {
		r = &DayRow{Site: site, Zone: zone, Day: day}
		b.days[k] = r
		b.order = append(b.order, k)
		r.Depletion = b.totals[site+"/"+zone].EndDepletion
	}
	return r
}

func (b *Backtest) event(e Event) {
	b.mu.Lock()
	defer b.mu.Unlock()
	switch e.Kind {
	case EventStep:
		s := e.Step
		r := b.row(e.Site, e.Zone, s.Start)
		r.ETc += s.ETc
		r.Rain += s.Rain
		r.EffRain += s.EffRain
		r.Drainage += s.Drainage
		r.Depletion = s.Depletion
		if s.Ks < 1 && s.Revision == 0 {
			r.StressHours++
			if s.Intended {
				r.IntendedStressHours++
			}
		}
		if s.Revision == 0 {
			r.ETcPot += s.Hour.ETcPot
		}
		if s.Fallback && s.Revision == 0 {
			r.FallbackHours++
		}
		if s.Missing && s.Revision == 0 {
			r.MissingHours++
		}
		b.totals[e.Site+"/"+e.Zone].EndDepletion = s.Depletion
	case EventCancelled:
		c := e.Command
		r := b.row(e.Site, e.Zone, c.Start)
		r.Cancelled++
		r.CancelledMinutes += c.Minutes
	case EventCredited:
		s, c := e.Step, e.Command
		r := b.row(e.Site, e.Zone, c.Start)
		if c.MinutesRun > 0 {
			r.Runs++
		}
		r.Minutes += c.MinutesRun
		r.GrossMM += c.MinutesRun / 60 * c.Rate
		r.CreditedMM += s.Irrigation
		r.Drainage += s.Drainage
		r.Leach += s.Leach
		r.Depletion = s.Depletion
		b.totals[e.Site+"/"+e.Zone].EndDepletion = s.Depletion
	}
}

// Rows returns the day rows, by zone then day.
func (b *Backtest) Rows() []DayRow {
	b.mu.Lock()
	defer b.mu.Unlock()
	keys := append([]string(nil), b.order...)
	sort.Strings(keys)
	out := make([]DayRow, 0, len(keys))
	for _, k := range keys {
		out = append(out, *b.days[k])
	}
	return out
}

// Totals returns each zone's season totals, by zone.
func (b *Backtest) Totals() []ZoneTotals {
	rows := b.Rows()
	b.mu.Lock()
	defer b.mu.Unlock()
	var out []ZoneTotals
	for _, k := range sortedKeys(b.totals) {
		t := *b.totals[k]
		t.Days, t.ETc, t.Rain, t.EffRain, t.Runs, t.Minutes = 0, 0, 0, 0, 0, 0
		t.GrossMM, t.CreditedMM, t.Drainage, t.StressHours, t.FallbackHours, t.MissingHours = 0, 0, 0, 0, 0, 0
		t.Cancelled, t.CancelledMinutes = 0, 0
		t.IntendedStressHours, t.ETcPot, t.Leach = 0, 0, 0
		for _, r := range rows {
			if r.Site != t.Site || r.Zone != t.Zone {
				continue
			}
			t.Days++
			t.ETc += r.ETc
			t.Rain += r.Rain
			t.EffRain += r.EffRain
			t.Runs += r.Runs
			t.Minutes += r.Minutes
			t.GrossMM += r.GrossMM
			t.CreditedMM += r.CreditedMM
			t.Cancelled += r.Cancelled
			t.CancelledMinutes += r.CancelledMinutes
			t.Drainage += r.Drainage
			t.StressHours += r.StressHours
			t.FallbackHours += r.FallbackHours
			t.MissingHours += r.MissingHours
			t.IntendedStressHours += r.IntendedStressHours
			t.ETcPot += r.ETcPot
			t.Leach += r.Leach
		}
		out = append(out, t)
	}
	return out
}

func sortedKeys[V any](m map[string]V) []string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	return keys
}

// WriteDays prints the day rows as an aligned table. runs, minutes and
// gross_mm count only water that ran (as reported); cancelled counts the
// cycles withdrawn before they were sent.
func WriteDays(w io.Writer, rows []DayRow) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "day\tzone\tetc_mm\train_mm\teff_rain_mm\truns\tminutes\tgross_mm\tcredited_mm\tcancelled\tdrainage_mm\tdepletion_mm\tstress_h\t")
	for _, r := range rows {
		fmt.Fprintf(tw, "%s\t%s\t%.2f\t%.1f\t%.1f\t%d\t%.0f\t%.1f\t%.1f\t%d\t%.1f\t%.1f\t%d\t\n",
			r.Day, r.Zone, r.ETc, r.Rain, r.EffRain, r.Runs, r.Minutes, r.GrossMM, r.CreditedMM, r.Cancelled, r.Drainage, r.Depletion, r.StressHours)
	}
	return tw.Flush()
}

// WriteTotals prints the season totals per zone, counted as WriteDays does.
func WriteTotals(w io.Writer, totals []ZoneTotals) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "zone\tdays\tetc_mm\train_mm\teff_rain_mm\truns\tminutes\tgross_mm\tcredited_mm\tcancelled\tcancelled_min\tdrainage_mm\tstart_dep_mm\tend_dep_mm\tstress_h\tfallback_h\tmissing_h\tintended_stress_h\tetc_pot_mm\tleach_mm\t")
	for _, t := range totals {
		fmt.Fprintf(tw, "%s\t%d\t%.1f\t%.1f\t%.1f\t%d\t%.0f\t%.1f\t%.1f\t%d\t%d\t%.1f\t%.1f\t%.1f\t%d\t%d\t%d\t%d\t%.1f\t%.1f\t\n",
			t.Zone, t.Days, t.ETc, t.Rain, t.EffRain, t.Runs, t.Minutes, t.GrossMM, t.CreditedMM, t.Cancelled, t.CancelledMinutes, t.Drainage,
			t.StartDepletion, t.EndDepletion, t.StressHours, t.FallbackHours, t.MissingHours, t.IntendedStressHours, t.ETcPot, t.Leach)
	}
	return tw.Flush()
}

// OpenBacktest prepares a backtest of cfg's zones in a temporary state file;
// it returns nil when cfg has no zones. Call the returned function to remove
// the file.
func OpenBacktest(cfg *config.Config) (*Backtest, func(), error) {
	n := 0
	for i := range cfg.Sites {
		n += len(cfg.Sites[i].Zones)
	}
	if n == 0 {
		return nil, func() {}, nil
	}
	dir, err := os.MkdirTemp("", "etpulse-zones-")
	if err != nil {
		return nil, nil, fmt.Errorf("open backtest: %w", err)
	}
	db, err := state.Open(filepath.Join(dir, "zones.db"))
	if err != nil {
		_ = os.RemoveAll(dir)
		return nil, nil, fmt.Errorf("open backtest: %w", err)
	}
	cleanup := func() {
		_ = db.Close()
		_ = os.RemoveAll(dir)
	}
	bt, err := NewBacktest(cfg, db, nil)
	if err != nil {
		cleanup()
		return nil, nil, err
	}
	return bt, cleanup, nil
}

// Report writes the day table to path (atomically: temp file, fsync,
// rename) when path is set, and the season totals to w when summary is set.
func (b *Backtest) Report(path string, summary bool, w io.Writer) error {
	if path != "" {
		if err := writeFileAtomic(path, func(f io.Writer) error { return WriteDays(f, b.Rows()) }); err != nil {
			return fmt.Errorf("zone backtest: %w", err)
		}
	}
	if summary {
		if err := WriteTotals(w, b.Totals()); err != nil {
			return fmt.Errorf("zone backtest: %w", err)
		}
	}
	return nil
}

func writeFileAtomic(path string, write func(io.Writer) error) error {
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".tmp-")
	if err != nil {
		return err
	}
	tmp := f.Name()
	defer os.Remove(tmp)
	bw := bufio.NewWriter(f)
	if err := write(bw); err != nil {
		_ = f.Close()
		return err
	}
	if err := bw.Flush(); err != nil {
		_ = f.Close()
		return err
	}
	if err := f.Sync(); err != nil {
		_ = f.Close()
		return err
	}
	if err := f.Close(); err != nil {
		return err
	}
	return os.Rename(tmp, path)
}
