package status

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"strings"
	"time"

	"etpulse/controllers"
	"etpulse/gateway/alert"
	"etpulse/gateway/config"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/store"
	"etpulse/gateway/vocab"
	"etpulse/gateway/zones"
	"etpulse/hourly"
)

// Zones is what the reader needs of the zone service (*zones.Service).
type Zones interface {
	Status(now time.Time) ([]zones.ZoneStatus, error)
	Ledger(site string) ([]controllers.Command, error)
	Holds(site string) (controllers.Holds, error)
}

var _ Zones = (*zones.Service)(nil)

// Options are the sources a Reader reads.
type Options struct {
	Config  *config.Config
	History *store.History // the local history; nil shows no hours or steps
	// LastSeen is (*pipeline.Pipeline).LastSeen; nil shows no reading ages.
	LastSeen func(site, station string) ([]pipeline.Seen, error)
	Zones    Zones                // nil when no zone is configured
	Alerts   func() []alert.Alert // active alerts ((*quality.Monitor).Active); nil: none
	Now      func() time.Time     // the gateway clock
}

// StationHours is how many hours the station page shows.
const StationHours = 72

// ZoneDays is how many days the zone page shows.
const ZoneDays = 14

// RunsShown is how many runs the zone page lists.
const RunsShown = 12

// Reader builds the views. It is safe for concurrent use.
type Reader struct{ o Options }

// New returns a reader over o; Config and Now are required.
func New(o Options) (*Reader, error) {
	if o.Config == nil || o.Now == nil {
		return nil, fmt.Errorf("new status reader: config and clock are required")
	}
	return &Reader{o: o}, nil
}

// ETLabel names a reference's ET in the trade's words.
func ETLabel(ref hourly.Reference) string {
	switch ref {
	case hourly.Tall:
		return "ETrs"
	case hourly.FAO56:
		return "ETo"
	default:
		return "ETos"
	}
}

// Overview returns the farm at a glance.
func (r *Reader) Overview() (Overview, error) {
	now := r.o.Now()
	ov := Overview{Version: APIVersion, Generated: now, Stations: []StationSummary{}, Zones: []ZoneSummary{}}
	active := r.active()
	ov.ActiveAlerts = len(active)
	for i := range r.o.Config.Sites {
		site := &r.o.Config.Sites[i]
		for j := range site.Stations {
			s, err := r.stationSummary(site, &site.Stations[j], now, active)
			if err != nil {
				return ov, err
			}
			ov.Stations = append(ov.Stations, s)
		}
	}
	zs, err := r.zoneSummaries(now)
	if err != nil {
		return ov, err
	}
	ov.Zones = zs
	return ov, nil
}

func (r *Reader) active() []AlertView {
	if r.o.Alerts == nil {
		return []AlertView{}
	}
	out := []AlertView{}
	for _, a := range r.o.Alerts() {
		out = append(out, alertView(a))
	}
	return out
}

func alertView(a alert.Alert) AlertView {
	v := AlertView{Site: a.Site, Station: a.Station, Sensor: a.Sensor, Quantity: string(a.Quantity), Kind: string(a.Kind),
		Severity: string(a.Severity), Message: a.Message, Value: finite(a.Value), Limit: finite(a.Limit), Updated: a.Updated}
	if !a.Since.IsZero() {
		since := a.Since
		v.Since = &since
	}
	if !a.Cleared.IsZero() {
		c := a.Cleared
		v.Cleared = &c
	}
	return v
}

func finite(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

// localDate returns t's date in a station's standard time.
func localDate(t time.Time, offsetHours float64) string {
	return t.UTC().Add(time.Duration(offsetHours * float64(time.Hour))).Format(time.DateOnly)
}

func (r *Reader) stationSummary(site *config.Site, st *config.Station, now time.Time, active []AlertView) (StationSummary, error) {
	s := StationSummary{Site: site.ID, Station: st.ID, Reference: string(st.Reference), ETLabel: ETLabel(st.Reference),
		UTCOffsetHours: st.UTCOffset, Alerts: []AlertView{}}
	if r.o.LastSeen != nil {
		seen, err := r.o.LastSeen(site.ID, st.ID)
		if err != nil {
			return s, fmt.Errorf("status of station %s/%s: %w", site.ID, st.ID, err)
		}
		var last time.Time
		for _, x := range seen {
			if x.Arrival.After(last) {
				last = x.Arrival
			}
		}
		if !last.IsZero() {
			age := max(0, now.Sub(last).Seconds())
			s.LastReading, s.AgeSeconds = &last, &age
		}
	}
	for _, a := range active {
		if a.Site == site.ID && a.Station == st.ID {
			s.Alerts = append(s.Alerts, a)
		}
	}
	today := localDate(now, st.UTCOffset)
	yesterday := localDate(now.Add(-24*time.Hour), st.UTCOffset)
	err := r.hours(site.ID, st.ID, now.Add(-50*time.Hour), now, func(h HourView) {
		if h.ET == nil {
			return
		}
		switch localDate(h.Start, st.UTCOffset) {
		case today:
			s.TodayET += *h.ET
			s.TodayHours++
		case yesterday:
			s.YesterdayET += *h.ET
			s.YesterdayHours++
		}
	})
	if err != nil {
		return s, fmt.Errorf("status of station %s/%s: %w", site.ID, st.ID, err)
	}
	return s, nil
}

// hours calls fn with every closed hour of a station in [from, to) kept in
// the local history, oldest first.
func (r *Reader) hours(site, station string, from, to time.Time, fn func(HourView)) error {
	if r.o.History == nil {
		return nil
	}
	f := store.Filter{From: from, To: to, Station: station, Measurements: []string{store.MeasurementHour}}
	return r.o.History.Range(f, func(p store.Point) error {
		if p.Tags["site"] != site {
			return nil
		}
		fn(hourView(p))
		return nil
	})
}

func hourView(p store.Point) HourView {
	h := HourView{Start: p.Time, Local: p.Notes[vocab.LocalStart], Fill: p.Notes[vocab.Fill]}
	h.ET, h.Rs, h.Rso, h.AirTemp = num(p, vocab.ETmm), num(p, vocab.SolarMJ), num(p, vocab.RsoMJ), num(p, vocab.AirTempC)
	if ea, es := num(p, vocab.EaKPa), num(p, vocab.EsKPa); ea != nil && es != nil && *es > 0 {
		rh := min(100, 100**ea / *es)
		h.RH = &rh
	}
	if v := num(p, vocab.RainMM); v != nil {
		h.Rain = *v
	}
	h.Day, _ = p.Fields[vocab.Day].(bool)
	h.Complete, _ = p.Fields[vocab.Complete].(bool)
	if v, ok := p.Fields["revision"].(int64); ok {
		h.Revision = int(v)
	}
	if f := p.Notes["flags"]; f != "" {
		h.Flags = strings.Split(f, ";")
	}
	return h
}

// num returns a numeric field as a float, nil when absent or not finite.
func num(p store.Point, key string) *float64 {
	switch v := p.Fields[key].(type) {
	case float64:
		return finite(v)
	case int64:
		f := float64(v)
		return &f
	}
	return nil
}

// Station returns a station's last StationHours hours.
func (r *Reader) Station(siteID, stationID string) (StationPage, error) {
	site, st := r.findStation(siteID, stationID)
	if st == nil {
		return StationPage{}, fmt.Errorf("station %q of site %q: %w", stationID, siteID, ErrNotFound)
	}
	now := r.o.Now()
	sum, err := r.stationSummary(site, st, now, r.active())
	if err != nil {
		return StationPage{}, err
	}
	pg := StationPage{Version: APIVersion, Summary: sum, From: now.Add(-StationHours * time.Hour).Truncate(time.Hour), To: now,
		Hours: []HourView{}}
	err = r.hours(siteID, stationID, pg.From, now, func(h HourView) {
		pg.Hours = append(pg.Hours, h)
		if h.Revision > 0 {
			pg.RevisedHours++
		}
		if h.Fill != "" {
			pg.FilledHours++
		}
		if len(h.Flags) > 0 {
			pg.FlaggedHours++
		}
		if !h.Complete {
			pg.IncompleteHours++
		}
	})
	if err != nil {
		return pg, fmt.Errorf("station %s/%s: %w", siteID, stationID, err)
	}
	cleared, err := r.cleared(now)
	if err != nil {
		return pg, err
	}
	pg.ClearedAlerts = []AlertView{}
	for _, a := range cleared {
		if a.Site == siteID && a.Station == stationID {
			pg.ClearedAlerts = append(pg.ClearedAlerts, a)
		}
	}
	return pg, nil
}

func (r *Reader) findStation(siteID, stationID string) (*config.Site, *config.Station) {
	for i := range r.o.Config.Sites {
		site := &r.o.Config.Sites[i]
		if site.ID != siteID {
			continue
		}
		if st := site.StationByID(stationID); st != nil {
			return site, st
		}
	}
	return nil, nil
}

func (r *Reader) findZone(siteID, zoneID string) (*config.Site, *config.Zone) {
	for i := range r.o.Config.Sites {
		site := &r.o.Config.Sites[i]
		if site.ID != siteID {
			continue
		}
		for j := range site.Zones {
			if site.Zones[j].ID == zoneID {
				return site, &site.Zones[j]
			}
		}
	}
	return nil, nil
}

// zoneSummaries returns every zone's current balance, hold and next run.
func (r *Reader) zoneSummaries(now time.Time) ([]ZoneSummary, error) {
	out := []ZoneSummary{}
	if r.o.Zones == nil {
		return out, nil
	}
	sts, err := r.o.Zones.Status(now)
	if err != nil {
		return nil, fmt.Errorf("status of zones: %w", err)
	}
	holds := map[string]controllers.Holds{}
	ledgers := map[string][]controllers.Command{}
	for _, zs := range sts {
		if _, ok := holds[zs.Site]; !ok {
			if holds[zs.Site], err = r.o.Zones.Holds(zs.Site); err != nil {
				return nil, fmt.Errorf("status of zones: %w", err)
			}
			if ledgers[zs.Site], err = r.o.Zones.Ledger(zs.Site); err != nil {
				return nil, fmt.Errorf("status of zones: %w", err)
			}
		}
		s := ZoneSummary{Site: zs.Site, Zone: zs.Zone, Depletion: zs.State.Depletion,
			TAW: zs.Levels.TAW, RAW: zs.Levels.RAW, Trigger: zs.Levels.Trigger, Target: zs.Levels.Target,
			Stressed: zs.State.Depletion > zs.Levels.RAW}
		if _, zc := r.findZone(zs.Site, zs.Zone); zc != nil {
			s.Station = zc.Station
			if _, st := r.findStation(zs.Site, zc.Station); st != nil {
				s.UTCOffsetHours = st.UTCOffset
			}
		}
		if !zs.State.LastValid.IsZero() {
			lv := zs.State.LastValid
			s.LastValid = &lv
		}
		h := holds[zs.Site]
		if hold, ok := h.For(zs.Zone, now); ok {
			hv := &HoldView{Scope: "zone", Forever: hold.Forever, Reason: hold.Reason}
			if h.Site.Active(now) {
				hv.Scope = "site"
			}
			if !hold.Forever {
				u := hold.Until
				hv.Until = &u
			}
			s.Hold = hv
		}
		s.NextRun = nextRun(ledgers[zs.Site], zs.Zone, now)
		out = append(out, s)
	}
	return out, nil
}

// nextRun returns the zone's earliest planned (not yet sent) run: its first
// planned cycle's start, minutes and cycle count.
func nextRun(ledger []controllers.Command, zone string, now time.Time) *PlanView {
	var best *controllers.Command
	for i := range ledger {
		c := &ledger[i]
		if c.Zone != zone || c.State != controllers.Planned || c.Expiry.Before(now) {
			continue
		}
		if best == nil || c.Start.Before(best.Start) {
			best = c
		}
	}
	if best == nil {
		return nil
	}
	return &PlanView{Start: best.Start, Minutes: best.Minutes, Cycles: best.Cycles}
}

// Zone returns a zone's last ZoneDays days.
func (r *Reader) Zone(siteID, zoneID string) (ZonePage, error) {
	site, zc := r.findZone(siteID, zoneID)
	if zc == nil || r.o.Zones == nil {
		return ZonePage{}, fmt.Errorf("zone %q of site %q: %w", zoneID, siteID, ErrNotFound)
	}
	now := r.o.Now()
	sums, err := r.zoneSummaries(now)
	if err != nil {
		return ZonePage{}, err
	}
	pg := ZonePage{Version: APIVersion, To: now, Steps: []StepView{}, Days: []DayView{}, Runs: []RunView{}}
	for _, s := range sums {
		if s.Site == siteID && s.Zone == zoneID {
			pg.Summary = s
		}
	}
	offset := 0.0
	if st := site.StationByID(zc.Station); st != nil {
		offset = st.UTCOffset
	}
	// The window starts at local midnight ZoneDays-1 days ago.
	local := now.UTC().Add(time.Duration(offset * float64(time.Hour)))
	midnight := time.Date(local.Year(), local.Month(), local.Day(), 0, 0, 0, 0, time.UTC)
	pg.From = midnight.AddDate(0, 0, -(ZoneDays - 1)).Add(-time.Duration(offset * float64(time.Hour)))
	days := map[string]*DayView{}
	for d := 0; d < ZoneDays; d++ {
		date := midnight.AddDate(0, 0, d-(ZoneDays-1)).Format(time.DateOnly)
		pg.Days = append(pg.Days, DayView{Date: date})
	}
	for i := range pg.Days {
		days[pg.Days[i].Date] = &pg.Days[i]
	}
	if r.o.History != nil {
		f := store.Filter{From: pg.From, To: now.Add(time.Hour), Measurements: []string{store.MeasurementZone}}
		err := r.o.History.Range(f, func(p store.Point) error {
			if p.Tags["site"] != siteID || p.Tags["zone"] != zoneID {
				return nil
			}
			s := stepView(p)
			pg.Steps = append(pg.Steps, s)
			if d := days[localDate(s.Time, offset)]; d != nil {
				d.ETc += s.ETc
				d.EffRain += s.EffRain
				d.Irrigation += s.Irrigation
				if s.Kind == string(controllers.StepHour) && s.Ks < 1 {
					d.StressHours++
					pg.StressHours++
				}
			}
			return nil
		})
		if err != nil {
			return pg, fmt.Errorf("zone %s/%s: %w", siteID, zoneID, err)
		}
	}
	ledger, err := r.o.Zones.Ledger(siteID)
	if err != nil {
		return pg, fmt.Errorf("zone %s/%s: %w", siteID, zoneID, err)
	}
	for _, c := range ledger {
		if c.Zone != zoneID || c.State == controllers.Planned {
			continue
		}
		pg.Runs = append(pg.Runs, runView(c))
	}
	slices.SortFunc(pg.Runs, func(a, b RunView) int {
		return cmp.Or(b.Start.Compare(a.Start), cmp.Compare(b.Cycle, a.Cycle))
	})
	if len(pg.Runs) > RunsShown {
		pg.Runs = pg.Runs[:RunsShown]
	}
	return pg, nil
}

func stepView(p store.Point) StepView {
	f := func(k string) float64 {
		if v := num(p, k); v != nil {
			return *v
		}
		return 0
	}
	s := StepView{Time: p.Time, Kind: p.Notes["kind"], Depletion: f("depletion_mm"), RAW: f("raw_mm"), TAW: f("taw_mm"),
		ETc: f("etc_mm"), EffRain: f("eff_rain_mm"), Irrigation: f("irrigation_mm"), Ks: f("ks")}
	s.Estimated, _ = p.Fields["estimated"].(bool)
	s.Missing, _ = p.Fields["missing"].(bool)
	if s.Kind == "" {
		s.Kind = string(controllers.StepHour)
	}
	return s
}

func runView(c controllers.Command) RunView {
	v := RunView{ID: c.ID, Start: c.Start, Cycle: c.Cycle, Cycles: c.Cycles, Minutes: c.Minutes, State: string(c.State),
		Credit: c.CreditMM, Credited: c.Credited, Note: c.Note}
	if c.RunKnown {
		m := c.MinutesRun
		v.MinutesRun = &m
	}
	if c.VolumeL > 0 {
		vol := c.VolumeL
		v.VolumeL = &vol
	}
	if !c.EndedAt.IsZero() {
		e := c.EndedAt
		v.Ended = &e
	}
	return v
}

// Alerts returns the active alerts and those cleared within ClearedWindow.
func (r *Reader) Alerts() (AlertsPage, error) {
	now := r.o.Now()
	pg := AlertsPage{Version: APIVersion, Generated: now, Active: r.active()}
	cleared, err := r.cleared(now)
	if err != nil {
		return pg, err
	}
	pg.Cleared = cleared
	return pg, nil
}

// cleared reads the alerts cleared within ClearedWindow from the local
// history, latest first.
func (r *Reader) cleared(now time.Time) ([]AlertView, error) {
	out := []AlertView{}
	if r.o.History == nil {
		return out, nil
	}
	f := store.Filter{From: now.Add(-ClearedWindow), To: now.Add(time.Minute), Measurements: []string{store.MeasurementAlert, store.MeasurementZoneAlert}}
	err := r.o.History.Range(f, func(p store.Point) error {
		if active, ok := p.Fields["active"].(bool); !ok || active {
			return nil
		}
		t := p.Time
		out = append(out, AlertView{Site: p.Tags["site"], Station: p.Tags["station"], Sensor: p.Tags["sensor"],
			Quantity: p.Tags["quantity"], Kind: p.Tags["kind"], Severity: p.Notes["severity"], Message: p.Notes["message"],
			Value: num(p, "value"), Limit: num(p, "limit"), Updated: t, Cleared: &t})
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("cleared alerts: %w", err)
	}
	slices.Reverse(out)
	return out, nil
}
