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
	"etpulse/gateway/config"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
	"etpulse/hourly"
)

// Backtest runs the zones offline over recorded hours (etpulse replay): the
// same balance, decisions and ledger as the live gateway, with every valve
// reporting a normal run (finished, commanded minutes, at the planned end).
// It collects one row per zone and standard-time day, and season totals.
type Backtest struct {
	svc   *Service
	clock *backtestClock

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
	Site, Zone, Day string
	ETc             float64 // mm
	Rain            float64 // measured, mm
	EffRain         float64 // mm
	Runs            int     // commands planned (cycles count one each)
	PlannedMinutes  int
	GrossMM         float64 // planned minutes x rate
	CreditedMM      float64 // net irrigation credited
	Drainage        float64 // mm
	Depletion       float64 // at the end of the day, mm
	StressHours     int     // hours with Ks < 1
	FallbackHours   int
	MissingHours    int
}

// ZoneTotals are a zone's totals over a backtest.
type ZoneTotals struct {
	Site, Zone                    string
	Days                          int
	ETc, Rain, EffRain            float64
	Runs, PlannedMinutes          int
	GrossMM, CreditedMM, Drainage float64
	StartDepletion, EndDepletion  float64
	StressHours, FallbackHours    int
	MissingHours                  int
}

// NewBacktest builds the zones of cfg on db, a scratch state file of its
// own (not the pipeline's). pts, when set, receives the step, command and
// report points like the live gateway's outbox.
func NewBacktest(cfg *config.Config, db *bbolt.DB, pts store.Enqueuer) (*Backtest, error) {
	b := &Backtest{clock: &backtestClock{}, days: map[string]*DayRow{}, totals: map[string]*ZoneTotals{}}
	svc, err := New(Options{Config: cfg, DB: db, Store: pts, Clock: b.clock.Now, OnEvent: b.event})
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
// not used) and runs the scheduler up to the end of the hour. With several
// stations driving zones the readings should be sorted by time: the
// scheduler's clock only moves forward.
func (b *Backtest) HandleHour(_ *bbolt.Tx, rec hourly.Record) error {
	if err := b.svc.o.DB.Update(func(tx *bbolt.Tx) error { return b.svc.HandleHour(tx, rec) }); err != nil {
		return fmt.Errorf("backtest: %w", err)
	}
	return b.Advance(rec.End)
}

// Advance runs the scheduler up to t: plans, sends and the simulated valve
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
			ref := b.svc.zones[b.svc.siteOf(o.cmd.Zone)+"/"+o.cmd.Zone]
			if ref == nil || !o.first {
				continue
			}
			start := o.cmd.Start
			if start.Before(at) {
				start = at
			}
			m := float64(o.cmd.Minutes)
			b.finishes = append(b.finishes,
				finish{at: start, ref: ref, r: controllers.Report{ID: o.cmd.ID, State: controllers.ReportStarted}},
				finish{at: start.Add(time.Duration(o.cmd.Minutes) * time.Minute), ref: ref, r: controllers.Report{ID: o.cmd.ID, State: controllers.ReportFinished, MinutesRun: m, HasMinutes: true}})
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
		}
		if s.Fallback && s.Revision == 0 {
			r.FallbackHours++
		}
		if s.Missing && s.Revision == 0 {
			r.MissingHours++
		}
		b.totals[e.Site+"/"+e.Zone].EndDepletion = s.Depletion
	case EventPlanned:
		c := e.Command
		r := b.row(e.Site, e.Zone, c.Start)
		r.Runs++
		r.PlannedMinutes += c.Minutes
		r.GrossMM += float64(c.Minutes) / 60 * c.Rate
	case EventCredited:
		s := e.Step
		r := b.row(e.Site, e.Zone, s.Start)
		r.CreditedMM += s.Irrigation
		r.Drainage += s.Drainage
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
		t.Days, t.ETc, t.Rain, t.EffRain, t.Runs, t.PlannedMinutes = 0, 0, 0, 0, 0, 0
		t.GrossMM, t.CreditedMM, t.Drainage, t.StressHours, t.FallbackHours, t.MissingHours = 0, 0, 0, 0, 0, 0
		for _, r := range rows {
			if r.Site != t.Site || r.Zone != t.Zone {
				continue
			}
			t.Days++
			t.ETc += r.ETc
			t.Rain += r.Rain
			t.EffRain += r.EffRain
			t.Runs += r.Runs
			t.PlannedMinutes += r.PlannedMinutes
			t.GrossMM += r.GrossMM
			t.CreditedMM += r.CreditedMM
			t.Drainage += r.Drainage
			t.StressHours += r.StressHours
			t.FallbackHours += r.FallbackHours
			t.MissingHours += r.MissingHours
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

// WriteDays prints the day rows as an aligned table.
func WriteDays(w io.Writer, rows []DayRow) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "day\tzone\tetc_mm\train_mm\teff_rain_mm\truns\tminutes\tgross_mm\tcredited_mm\tdrainage_mm\tdepletion_mm\tstress_h\t")
	for _, r := range rows {
		fmt.Fprintf(tw, "%s\t%s\t%.2f\t%.1f\t%.1f\t%d\t%d\t%.1f\t%.1f\t%.1f\t%.1f\t%d\t\n",
			r.Day, r.Zone, r.ETc, r.Rain, r.EffRain, r.Runs, r.PlannedMinutes, r.GrossMM, r.CreditedMM, r.Drainage, r.Depletion, r.StressHours)
	}
	return tw.Flush()
}

// WriteTotals prints the season totals per zone.
func WriteTotals(w io.Writer, totals []ZoneTotals) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "zone\tdays\tetc_mm\train_mm\teff_rain_mm\truns\tminutes\tgross_mm\tcredited_mm\tdrainage_mm\tstart_dep_mm\tend_dep_mm\tstress_h\tfallback_h\tmissing_h\t")
	for _, t := range totals {
		fmt.Fprintf(tw, "%s\t%d\t%.1f\t%.1f\t%.1f\t%d\t%d\t%.1f\t%.1f\t%.1f\t%.1f\t%.1f\t%d\t%d\t%d\t\n",
			t.Zone, t.Days, t.ETc, t.Rain, t.EffRain, t.Runs, t.PlannedMinutes, t.GrossMM, t.CreditedMM, t.Drainage,
			t.StartDepletion, t.EndDepletion, t.StressHours, t.FallbackHours, t.MissingHours)
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
