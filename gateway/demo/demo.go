package demo

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"go.etcd.io/bbolt"

	"etpulse/gateway"
	"etpulse/gateway/clock"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
	"etpulse/gateway/zones"
	"etpulse/hourly"
)

// RunOptions configure a demo run.
type RunOptions struct {
	Days int    // simulated days; default 1
	Seed uint64 // weather and injected faults; the same seed prints the same table
	// Speed is simulated seconds per wall-clock second; 0 runs as fast as
	// the pipeline goes.
	Speed  float64
	Out    io.Writer    // the table
	Logger *slog.Logger // gateway logs; nil discards
	// StatePath keeps the run's state file (with its local history) at this
	// path, which must not exist yet; empty puts it in a temporary directory
	// removed when Run returns.
	StatePath string

	// StatusAddr is where the status pages are served while the demo runs
	// (host:port, loopback); empty picks a free port on 127.0.0.1. Serve
	// keeps them up after the simulated days, until ctx is cancelled.
	StatusAddr string
	Serve      bool
	// Notes receives the status pages' address (a line that differs from
	// run to run, so kept apart from the table); nil means Out.
	Notes io.Writer
	// Served, when set, is called with the status pages' base URL once the
	// simulated days are over and the pages show all of them (before
	// Serve's wait).
	Served func(url string)

	// Hooks for other parts of the product to join the demo.
	Faults     map[string]Fault     // sensor faults, keyed "<station>/<sensor>"
	Components gateway.Components   // extra handlers, observers, gate, services
	Setup      func(env *Env) error // called once the broker, state and gateway exist, before the first reading
}

// Env is what a demo Setup hook can use: the embedded broker's URL, the
// simulated clock, the state file, the gateway and the table.
type Env struct {
	BrokerURL string
	Clock     *clock.Manual
	StatePath string
	Gateway   *gateway.Gateway
	Table     *Table
	Sim       *Sim
}

// Summary describes a finished demo run.
type Summary struct {
	Messages, Duplicates, Late, Bad int // published, by kind
	Field                           int // of Messages, the soil-moisture probe's readings
	Records, Revisions              int // hourly records printed
	History                         int // hourly records in the local history (store)
	ZoneSteps                       int // zone balance steps in the local history
	Rejected                        map[string]float64
	Wall                            time.Duration

	// StatePath is the kept state file (RunOptions.StatePath), empty when
	// the state was temporary. From and To bound the simulated days as UTC
	// dates (To exclusive): the period to export from it.
	StatePath string
	From, To  time.Time
}

// Run starts an embedded broker on loopback, the gateway with its state in a
// temporary directory (or at opt.StatePath), and the simulated farm; it
// prints closed hours as they come and returns after opt.Days simulated days.
func Run(ctx context.Context, opt RunOptions) (sum Summary, err error) {
	defer func() {
		if err != nil {
			err = fmt.Errorf("demo: %w", err)
		}
	}()
	began := time.Now()
	if opt.Days <= 0 {
		opt.Days = 1
	}
	if opt.Out == nil {
		opt.Out = io.Discard
	}
	if opt.Logger == nil {
		opt.Logger = slog.New(slog.DiscardHandler)
	}
	statePath := opt.StatePath
	if statePath == "" {
		dir, err := os.MkdirTemp("", "etpulse-demo-")
		if err != nil {
			return sum, err
		}
		defer os.RemoveAll(dir)
		statePath = filepath.Join(dir, "state.db")
	} else {
		if _, err := os.Stat(statePath); err == nil {
			return sum, fmt.Errorf("state file %s already exists: give a new path (the demo starts from an empty state)", statePath)
		} else if !errors.Is(err, fs.ErrNotExist) {
			return sum, fmt.Errorf("state file: %w", err)
		}
		sum.StatePath = statePath
	}

	broker, url, err := StartBroker(true)
	if err != nil {
		return sum, err
	}
	defer broker.Close()

	sim := New(Options{Seed: opt.Seed, Faults: opt.Faults, Scripted: true})
	cfg, err := sim.Config(ConfigOptions{BrokerURL: url, ClientID: "etpulse-demo", StatePath: statePath})
	if err != nil {
		return sum, err
	}
	db, err := state.Open(statePath)
	if err != nil {
		return sum, err
	}
	defer func() {
		if cerr := db.Close(); cerr != nil && err == nil {
			err = fmt.Errorf("close state: %w", cerr)
		}
	}()

	runCtx, cancel := context.WithCancel(ctx)
	defer cancel()
	client, err := mqtt.Dial(runCtx, mqtt.Options{URL: url, ClientID: "etpulse-demo", Workers: 1, MaxInflight: 1024, Logger: opt.Logger})
	if err != nil {
		return sum, err
	}
	defer client.Close(time.Second)

	// The demo drives time: the gateway runs stepped (RunStepped) and the
	// demo runs its passes at each simulated minute (settle).
	clk := clock.NewManual(sim.Start())
	tr := newTraffic()
	table := NewTable(opt.Out)
	fld, err := newField(sim, cfg, table)
	if err != nil {
		return sum, err
	}
	reg := prometheus.NewRegistry()
	comps := opt.Components
	// The status pages get a listener of their own (below), which outlives
	// the gateway's run when opt.Serve asks for it.
	cfg.HTTP.Disabled = true
	g, err := gateway.New(cfg, gateway.Deps{
		Logger: opt.Logger, Registerer: reg, Gatherer: reg, DB: db, MQTT: tr.client("gateway", client),
		Clock: clk, Components: comps,
		OnRecord: table.Record, OnZoneEvent: func(e zones.Event) { fld.zoneEvent(e); zoneEvent(table, e) },
	})
	if err != nil {
		return sum, err
	}
	pages, err := serveStatus(ctx, g, reg, opt)
	if err != nil {
		return sum, err
	}
	defer pages.stop()
	if opt.Notes == nil {
		opt.Notes = opt.Out
	}
	fmt.Fprintf(opt.Notes, "etpulse demo: status pages at %s (on the simulated farm's clock)\n", pages.url)
	env := &Env{BrokerURL: url, Clock: clk, StatePath: statePath, Gateway: g, Table: table, Sim: sim}
	if opt.Setup != nil {
		if err := opt.Setup(env); err != nil {
			return sum, fmt.Errorf("setup: %w", err)
		}
	}
	runDone := make(chan error, 1)
	go func() { runDone <- g.RunStepped(runCtx) }()
	select {
	case <-g.Ready():
	case err := <-runDone:
		return sum, fmt.Errorf("gateway: %w", err)
	}
	st := &stepper{g: g, traffic: tr, runDone: runDone}
	if hasZones(cfg) {
		vc, v, err := serveValves(runCtx, url, cfg, clk, tr, opt.Logger)
		if err != nil {
			return sum, err
		}
		defer vc.Close(time.Second)
		st.valves = v
		if fld != nil {
			fld.valves = v
		}
	}

	end := sim.Start().Add(time.Duration(opt.Days) * 24 * time.Hour)
	msgs := sim.Generate(sim.Start(), end.Add(10*time.Minute))
	table.Header(sim, opt)

	step := time.Minute
	i := 0
	publishUntil := func(at time.Time) error {
		for ; i < len(msgs) && !msgs[i].At.After(at); i++ {
			m := msgs[i]
			// A late reading revises a closed hour, and the readings handled
			// in one batch make one revision: it goes in a batch of its own,
			// so the revisions do not depend on how the intake's batches fall.
			alone := m.Kind == Late
			if alone {
				if err := st.quiet(ctx); err != nil {
					return err
				}
			}
			n := tr.expect(m.Topic, false)
			if err := broker.Publish(m.Topic, m.Payload, false, 1); err != nil {
				tr.add(-n)
				return fmt.Errorf("publish: %w", err)
			}
			st.readings++
			if alone {
				if err := st.quiet(ctx); err != nil {
					return err
				}
			}
			switch m.Kind {
			case Duplicate:
				sum.Duplicates++
			case Late:
				sum.Late++
			case Bad:
				sum.Bad++
			}
		}
		return nil
	}
	wallStart := time.Now()
	last := end.Add(10 * time.Minute)
	for at := sim.Start(); !at.After(last); at = at.Add(step) {
		if err := publishUntil(at); err != nil {
			return sum, err
		}
		if fld != nil && fld.valves != nil {
			for _, m := range fld.messages(at) {
				n := tr.expect(m.Topic, false)
				if err := broker.Publish(m.Topic, m.Payload, false, 1); err != nil {
					tr.add(-n)
					return sum, fmt.Errorf("publish: %w", err)
				}
				if m.Reading {
					st.readings++
					sum.Field++
				}
			}
		}
		if err := st.settle(ctx, at); err != nil {
			return sum, err
		}
		table.Flush()
		clk.Set(at.Add(step))
		if opt.Speed > 0 {
			simElapsed := at.Sub(sim.Start())
			if d := time.Duration(float64(simElapsed)/opt.Speed) - time.Since(wallStart); d > 0 {
				select {
				case <-time.After(d):
				case <-ctx.Done():
					return sum, ctx.Err()
				}
			}
		}
	}
	// Late messages held back past the last simulated minute.
	if err := publishUntil(msgs[len(msgs)-1].At); err != nil {
		return sum, err
	}
	if err := st.settle(ctx, clk.Now()); err != nil {
		return sum, err
	}
	table.Flush()
	cancel()
	if err := <-runDone; err != nil {
		return sum, fmt.Errorf("gateway: %w", err)
	}
	table.Flush()
	published := int(st.readings)
	sum.Messages = published
	sum.Records, sum.Revisions = table.Counts()
	sum.Rejected = rejectedByReason(reg)
	if err := countHistory(db, &sum); err != nil {
		return sum, err
	}
	sum.From = sim.Start().UTC().Truncate(24 * time.Hour)
	sum.To = end.UTC().Truncate(24 * time.Hour).Add(24 * time.Hour)
	sum.Wall = time.Since(began)
	table.Footer(sum)
	if opt.Served != nil {
		opt.Served(pages.url)
	}
	if opt.Serve {
		fmt.Fprintf(opt.Notes, "etpulse demo: the simulated days are over; status pages still at %s until Ctrl-C\n", pages.url)
		select {
		case <-ctx.Done():
		case <-pages.done:
			if pages.err != nil {
				return sum, fmt.Errorf("status pages: %w", pages.err)
			}
		}
	}
	return sum, nil
}

// countHistory counts the hourly records and zone steps the run left in the
// local history.
func countHistory(db *bbolt.DB, sum *Summary) error {
	h, err := store.OpenHistory(db)
	if err != nil {
		return err
	}
	if sum.History, err = h.Count(store.Filter{Measurements: []string{store.MeasurementHour}}); err != nil {
		return err
	}
	sum.ZoneSteps, err = h.Count(store.Filter{Measurements: []string{store.MeasurementZone}})
	return err
}

func rejectedByReason(g prometheus.Gatherer) map[string]float64 {
	out := map[string]float64{}
	mfs, err := g.Gather()
	if err != nil {
		return out
	}
	for _, mf := range mfs {
		if mf.GetName() != "etpulse_messages_rejected_total" {
			continue
		}
		for _, m := range mf.GetMetric() {
			for _, l := range m.GetLabel() {
				if l.GetName() == "reason" {
					out[l.GetValue()] += m.GetCounter().GetValue()
				}
			}
		}
	}
	return out
}

// Table prints closed hours as a readable table. Records are buffered and
// printed in hour and station order at each Flush, so a seed always prints
// the same table. Other parts of the demo add their own lines with Event.
type Table struct {
	mu        sync.Mutex
	w         io.Writer
	recs      []hourly.Record
	events    []string
	records   int
	revisions int
	dayET     map[string]map[string]float64 // station -> local date -> ET of latest revisions
	hourET    map[string]float64            // station/hour -> ET counted in dayET
	refs      map[string]hourly.Reference
	fcSkip    map[string]string // zone -> local date of its latest forecast skip line
}

// NewTable returns a table writing to w.
func NewTable(w io.Writer) *Table {
	return &Table{w: w, dayET: map[string]map[string]float64{}, hourET: map[string]float64{}, refs: map[string]hourly.Reference{}}
}

// Record queues a closed hour (gateway.Deps.OnRecord).
func (t *Table) Record(rec hourly.Record) {
	t.mu.Lock()
	defer t.mu.Unlock()
	t.recs = append(t.recs, rec)
}

// Event queues a free-form line (e.g. a valve command or an alert) printed
// after the hours of the same flush.
func (t *Table) Event(at time.Time, format string, args ...any) {
	t.mu.Lock()
	defer t.mu.Unlock()
	t.events = append(t.events, fmt.Sprintf("  >> %s  %s", localTime(at), fmt.Sprintf(format, args...)))
}

// firstForecastSkip reports whether zone's forecast skip at at is its
// first of the local day: the reason changes every minute while the rain
// falls (less of it is still to come), the table shows it once.
func (t *Table) firstForecastSkip(zone string, at time.Time) bool {
	t.mu.Lock()
	defer t.mu.Unlock()
	day := localTime(at)[:10]
	if t.fcSkip == nil {
		t.fcSkip = map[string]string{}
	}
	if t.fcSkip[zone] == day {
		return false
	}
	t.fcSkip[zone] = day
	return true
}

const tableFormat = "%-11s %-16s %6s %5s %6s %6s %6s %6s %6s  %s\n"

// Header prints the title and column names.
func (t *Table) Header(sim *Sim, opt RunOptions) {
	t.mu.Lock()
	defer t.mu.Unlock()
	fmt.Fprintf(t.w, "Tallowwood Flats (invented farm), %d simulated day(s) from %s local standard time (UTC+10), seed %d\n",
		opt.Days, localTime(sim.Start()), opt.Seed)
	fmt.Fprintln(t.w, "stations: orchard (ETrs, tall), paddock (ETos, short), glasshouse (FAO-56 hourly ETo); Rs, Rn, G in MJ/m2 per hour")
	fmt.Fprintln(t.w)
	fmt.Fprintf(t.w, tableFormat, "station", "hour", "T °C", "RH %", "u2 m/s", "Rs", "Rn", "G", "ET mm", "flags")
}

// Flush prints the queued records and events.
func (t *Table) Flush() {
	t.mu.Lock()
	defer t.mu.Unlock()
	order := map[string]int{Orchard: 0, Paddock: 1, Glasshouse: 2}
	sort.SliceStable(t.recs, func(i, j int) bool {
		a, b := t.recs[i], t.recs[j]
		if !a.Start.Equal(b.Start) {
			return a.Start.Before(b.Start)
		}
		if a.Station != b.Station {
			return order[a.Station] < order[b.Station]
		}
		return a.Revision < b.Revision
	})
	for _, rec := range t.recs {
		t.print(rec)
	}
	t.recs = t.recs[:0]
	for _, e := range t.events {
		fmt.Fprintln(t.w, e)
	}
	t.events = t.events[:0]
}

func (t *Table) print(rec hourly.Record) {
	t.records++
	flags := append([]string(nil), rec.Flags...)
	if rec.Revision > 0 {
		t.revisions++
		flags = append([]string{fmt.Sprintf("revision %d (late reading)", rec.Revision)}, flags...)
	}
	f := func(v float64, prec int) string { return fmt.Sprintf("%.*f", prec, v) }
	temp, rh, u2, rs, rn, g, et := "-", "-", "-", "-", "-", "-", "-"
	if s, ok := rec.Stats[hourly.AirTemp]; ok && s.Count > 0 {
		temp = f(rec.Inputs.AirTemp, 1)
		if es := hourly.SatVapourPressure(rec.Inputs.AirTemp); es > 0 && rec.Inputs.Ea > 0 {
			rh = f(min(100, 100*rec.Inputs.Ea/es), 0)
		}
	}
	if s, ok := rec.Stats[hourly.Wind]; ok && s.Count > 0 {
		u2 = f(rec.Inputs.Wind2, 1)
	}
	if s, ok := rec.Stats[hourly.Solar]; (ok && s.Count > 0) || rec.Fill != "" {
		rs = f(rec.Inputs.Solar, 2)
	}
	if r := rec.Result; r != nil {
		rn, g, et = f(r.Rn, 2), f(r.G, 2), f(r.ET, 2)
		t.refs[rec.Station] = r.Reference
		day := rec.LocalStart[:10]
		if t.dayET[rec.Station] == nil {
			t.dayET[rec.Station] = map[string]float64{}
		}
		key := rec.Station + "/" + rec.LocalStart
		t.dayET[rec.Station][day] += r.ET - t.hourET[key]
		t.hourET[key] = r.ET
	}
	local := strings.Replace(rec.LocalStart, "T", " ", 1)
	fmt.Fprintf(t.w, tableFormat, rec.Station, local, temp, rh, u2, rs, rn, g, et, strings.Join(flags, " "))
}

// Counts returns the records printed and how many of them were revisions.
func (t *Table) Counts() (records, revisions int) {
	t.mu.Lock()
	defer t.mu.Unlock()
	return t.records, t.revisions
}

// DayTotals returns, per station and local date, the sum of hourly ET over
// the latest revision of every complete hour.
func (t *Table) DayTotals() map[string]map[string]float64 {
	t.mu.Lock()
	defer t.mu.Unlock()
	out := map[string]map[string]float64{}
	for st, days := range t.dayET {
		out[st] = map[string]float64{}
		for d, v := range days {
			out[st][d] = v
		}
	}
	return out
}

// Footer prints the daily totals and what was injected and rejected.
func (t *Table) Footer(sum Summary) {
	totals := t.DayTotals()
	t.mu.Lock()
	defer t.mu.Unlock()
	fmt.Fprintln(t.w)
	names := map[hourly.Reference]string{hourly.Short: "ETos", hourly.Tall: "ETrs", hourly.FAO56: "ETo"}
	for _, st := range []string{Orchard, Paddock, Glasshouse} {
		days := make([]string, 0, len(totals[st]))
		for d := range totals[st] {
			days = append(days, d)
		}
		sort.Strings(days)
		for _, d := range days {
			fmt.Fprintf(t.w, "daily total  %-11s %s  %s %.2f mm (sum of complete hours)\n", st, d, names[t.refs[st]], totals[st][d])
		}
	}
	reasons := make([]string, 0, len(sum.Rejected))
	for r, n := range sum.Rejected {
		reasons = append(reasons, fmt.Sprintf("%s %.0f", r, n))
	}
	sort.Strings(reasons)
	fmt.Fprintf(t.w, "messages %d (duplicates %d, late %d, malformed %d); rejected: %s; hourly records %d (revisions %d); wall time %s\n",
		sum.Messages, sum.Duplicates, sum.Late, sum.Bad, strings.Join(reasons, ", "), sum.Records, sum.Revisions, sum.Wall.Round(10*time.Millisecond))
	if sum.StatePath == "" {
		fmt.Fprintf(t.w, "history: %d hourly records and %d zone steps in the local history of a temporary state file, removed when the demo ends (keep it with --state FILE)\n", sum.History, sum.ZoneSteps)
		return
	}
	fmt.Fprintf(t.w, "history: %d hourly records and %d zone steps kept in %s; print them with\n  etpulse export --state %s --from %s --to %s\n",
		sum.History, sum.ZoneSteps, sum.StatePath, sum.StatePath, sum.From.Format(time.DateOnly), sum.To.Format(time.DateOnly))
}

// localTime formats t in the farm's standard time.
func localTime(t time.Time) string {
	return t.Add(time.Duration(farmOffset * float64(time.Hour))).UTC().Format("2006-01-02 15:04")
}
