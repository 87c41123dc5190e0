// Package report builds the morning report of a site for one local day:
// per station the day's reference ET, rain, data coverage and alerts; per
// zone ETc, effective rain, water commanded and reported, depletion at the
// start and end of the day, stress hours and the next planned runs. It
// reads what the gateway already keeps (the local history and the zone
// ledger), so the same report comes from the running gateway's HTTP API
// and from a state file opened read-only.
package report

import (
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"
	"strings"
	"time"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/status"
	"etpulse/gateway/store"
	"etpulse/hourly"
)

// Version is the version of the report's JSON form.
const Version = 1

// Ledger is what the report needs of the zone service (*zones.Service):
// the commands of a site, for the next planned runs.
type Ledger interface {
	Ledger(site string) ([]controllers.Command, error)
}

// Sources are what a Builder reads.
type Sources struct {
	Config  *config.Config
	History *store.History   // the local history; required
	Zones   Ledger           // nil: no planned runs are shown
	Now     func() time.Time // the gateway clock; required
}

// Builder builds reports; it is safe for concurrent use.
type Builder struct{ s Sources }

// New returns a builder over s.
func New(s Sources) (*Builder, error) {
	if s.Config == nil || s.History == nil || s.Now == nil {
		return nil, errors.New("new report builder: configuration, local history and clock are required")
	}
	return &Builder{s: s}, nil
}

// Report is the morning report of one site and one local day.
type Report struct {
	Version   int       `json:"version"`
	Site      string    `json:"site"`
	Date      string    `json:"date"` // YYYY-MM-DD, each station's standard-time day
	Generated time.Time `json:"generated"`
	Stations  []Station `json:"stations"`
	Zones     []Zone    `json:"zones"`
}

// Station is one station's day.
type Station struct {
	Station        string  `json:"station"`
	UTCOffsetHours float64 `json:"utc_offset_hours"`
	// From and To bound the day in UTC: [From, To).
	From time.Time `json:"from"`
	To   time.Time `json:"to"`
	// ET is the day's reference ET per reference the station computes.
	ET     []ET    `json:"et"`
	RainMM float64 `json:"rain_mm"`
	// Hours of the day: complete (measured), filled (a named gap-filling
	// method supplied a value) and missing (no record, or too little data).
	HoursComplete int     `json:"hours_complete"`
	HoursFilled   int     `json:"hours_filled"`
	HoursMissing  int     `json:"hours_missing"`
	Alerts        []Alert `json:"alerts"`
}

// ET is the day's sum of one reference's hourly ET.
type ET struct {
	Reference string  `json:"reference"` // short, tall or fao56
	Label     string  `json:"label"`     // ETos, ETrs or ETo
	MM        float64 `json:"et_mm"`
	Hours     int     `json:"hours"` // hours with a computed value
}

// Alert is one alert raised during the day.
type Alert struct {
	Time     time.Time `json:"time"`
	Sensor   string    `json:"sensor,omitempty"`
	Quantity string    `json:"quantity,omitempty"`
	Kind     string    `json:"kind"`
	Severity string    `json:"severity,omitempty"`
	Message  string    `json:"message,omitempty"`
}

// Zone is one zone's day.
type Zone struct {
	Zone      string  `json:"zone"`
	Station   string  `json:"station"`
	ETcMM     float64 `json:"etc_mm"`
	EffRainMM float64 `json:"eff_rain_mm"`
	// Water: commanded minutes (distinct commands published that day),
	// what the valve controllers reported, and the depth credited.
	Commands        int     `json:"commands"`
	CommandedMin    float64 `json:"commanded_minutes"`
	ReportedMin     float64 `json:"reported_minutes"`
	ReportedVolumeL float64 `json:"reported_volume_l"`
	CreditedMM      float64 `json:"credit_mm"`
	// Depletion of the root zone before the day's first step and after its
	// last (null when the history holds no step there).
	DepletionStartMM *float64 `json:"depletion_start_mm"`
	DepletionEndMM   *float64 `json:"depletion_end_mm"`
	RAWMM            *float64 `json:"raw_mm"`
	TAWMM            *float64 `json:"taw_mm"`
	// StressHours counts the day's hours with Ks < 1 (depletion beyond
	// RAW, FAO-56 eq. 84).
	StressHours int `json:"stress_hours"`
	// Deficit is the day's shortfall of crop ET against its unstressed
	// value, 1 - Σ Ks Kc ETo / Σ Kc ETo (FAO-56 eq. 80/81), 0-1; null when
	// the day had no crop ET. Stage names the grower's deficit stage of the
	// day, IntendedDeficit its planned shortfall (1 - replace_fraction;
	// null for a stage that only raises the depletion allowed), and
	// IntendedStressHours the stress hours inside the stage.
	Deficit             *float64 `json:"deficit,omitempty"`
	Stage               string   `json:"stage,omitempty"`
	IntendedDeficit     *float64 `json:"intended_deficit,omitempty"`
	IntendedStressHours int      `json:"intended_stress_hours,omitempty"`
	Steps               int      `json:"steps"`
	Alerts              []Alert  `json:"alerts"`
	// Plan is the zone's open commands (planned, sent, accepted or started)
	// at the time of the report, earliest first.
	Plan []Run `json:"plan"`
}

// Run is one planned or open valve run.
type Run struct {
	ID      string    `json:"id"`
	Start   time.Time `json:"start"`
	Minutes int       `json:"minutes"`
	Cycle   int       `json:"cycle"`
	Cycles  int       `json:"cycles"`
	State   string    `json:"state"`
}

// InputError is a bad report request: which parameter, what is wrong and
// how to fix it.
type InputError struct {
	Param   string `json:"param"` // "site", "date" or "format"
	Problem string `json:"problem"`
}

func (e *InputError) Error() string { return e.Param + ": " + e.Problem }

// Site resolves the site of a request: the given id, or the only site.
func (b *Builder) Site(id string) (*config.Site, error) {
	ids := make([]string, len(b.s.Config.Sites))
	for i := range b.s.Config.Sites {
		ids[i] = b.s.Config.Sites[i].ID
		if id == ids[i] {
			return &b.s.Config.Sites[i], nil
		}
	}
	switch {
	case id == "" && len(ids) == 1:
		return &b.s.Config.Sites[0], nil
	case id == "":
		return nil, &InputError{"site", "the configuration has several sites; name one of " + strings.Join(ids, ", ")}
	}
	return nil, &InputError{"site", fmt.Sprintf("unknown site %q; the configuration has %s", id, strings.Join(ids, ", "))}
}

// dayOf parses the date ("" means yesterday at the site's first station's
// standard time, the morning report's day).
func (b *Builder) dayOf(site *config.Site, date string) (time.Time, error) {
	if date == "" {
		off := 0.0
		if len(site.Stations) > 0 {
			off = site.Stations[0].UTCOffset
		}
		now := b.s.Now().In(fixed(off))
		y, m, d := now.Date()
		return time.Date(y, m, d-1, 0, 0, 0, 0, time.UTC), nil
	}
	t, err := time.Parse(time.DateOnly, date)
	if err != nil {
		return time.Time{}, &InputError{"date", fmt.Sprintf("%q is not a date; give YYYY-MM-DD, e.g. 2024-07-14", date)}
	}
	return t, nil
}

func fixed(offsetHours float64) *time.Location {
	return time.FixedZone("", int(math.Round(offsetHours*3600)))
}

// bounds returns the day's start and end in UTC at a standard-time offset.
func bounds(day time.Time, offsetHours float64) (time.Time, time.Time) {
	y, m, d := day.Date()
	from := time.Date(y, m, d, 0, 0, 0, 0, fixed(offsetHours)).UTC()
	return from, from.Add(24 * time.Hour)
}

// lookback is how far before the day the report looks for the depletion
// at its start (a zone steps every hour; common practice, no source).
const lookback = 72 * time.Hour

// Report builds the report of site (id; "" for the only site) for the local
// date (YYYY-MM-DD; "" for yesterday). Errors about the request are
// *InputError.
func (b *Builder) Report(siteID, date string) (Report, error) {
	site, err := b.Site(siteID)
	if err != nil {
		return Report{}, err
	}
	day, err := b.dayOf(site, date)
	if err != nil {
		return Report{}, err
	}
	now := b.s.Now()
	r := Report{Version: Version, Site: site.ID, Date: day.Format(time.DateOnly), Generated: now.UTC(),
		Stations: []Station{}, Zones: []Zone{}}
	var ledger []controllers.Command
	if b.s.Zones != nil && len(site.Zones) > 0 {
		if ledger, err = b.s.Zones.Ledger(site.ID); err != nil {
			return r, fmt.Errorf("report %s %s: %w", site.ID, r.Date, err)
		}
	}
	err = b.s.History.View(func(rng store.RangeFunc) error {
		for i := range site.Stations {
			st, err := stationDay(rng, site.ID, &site.Stations[i], day)
			if err != nil {
				return err
			}
			r.Stations = append(r.Stations, st)
		}
		for i := range site.Zones {
			zc := &site.Zones[i]
			off := 0.0
			if st := site.StationByID(zc.Station); st != nil {
				off = st.UTCOffset
			}
			z, err := zoneDay(rng, site.ID, zc, off, day)
			if err != nil {
				return err
			}
			z.Plan = plan(ledger, zc.ID)
			r.Zones = append(r.Zones, z)
		}
		return nil
	})
	if err != nil {
		return r, fmt.Errorf("report %s %s: %w", site.ID, r.Date, err)
	}
	return r, nil
}

// stationDay sums one station's hours of the day.
func stationDay(rng store.RangeFunc, site string, cfg *config.Station, day time.Time) (Station, error) {
	from, to := bounds(day, cfg.UTCOffset)
	st := Station{Station: cfg.ID, UTCOffsetHours: cfg.UTCOffset, From: from, To: to, ET: []ET{}, Alerts: []Alert{}}
	type hour struct{ complete, filled bool }
	hours := map[time.Time]hour{}
	rain := map[time.Time]float64{}
	et := map[string]*ET{}
	err := rng(store.Filter{From: from, To: to, Station: cfg.ID, Measurements: []string{store.MeasurementHour, store.MeasurementAlert}}, func(p store.Point) error {
		if p.Tags["site"] != site {
			return nil
		}
		if p.Measurement == store.MeasurementAlert {
			if a, ok := raised(p); ok {
				st.Alerts = append(st.Alerts, a)
			}
			return nil
		}
		h := hours[p.Time]
		h.complete = h.complete || boolField(p, "complete")
		h.filled = h.filled || boolField(p, "filled")
		hours[p.Time] = h
		if v, ok := numField(p, "rain_mm"); ok {
			rain[p.Time] = v // the same rain in every reference's record
		}
		if v, ok := numField(p, "et_mm"); ok {
			ref := p.Tags["reference"]
			if et[ref] == nil {
				et[ref] = &ET{Reference: ref, Label: status.ETLabel(hourly.Reference(ref))}
			}
			et[ref].MM += v
			et[ref].Hours++
		}
		return nil
	})
	if err != nil {
		return st, fmt.Errorf("station %s: %w", cfg.ID, err)
	}
	for _, h := range hours {
		switch {
		case h.filled:
			st.HoursFilled++
		case h.complete:
			st.HoursComplete++
		}
	}
	st.HoursMissing = 24 - st.HoursComplete - st.HoursFilled
	for _, v := range rain {
		st.RainMM += v
	}
	st.RainMM = round(st.RainMM, 2)
	for _, ref := range slices.Sorted(maps.Keys(et)) {
		e := *et[ref]
		e.MM = round(e.MM, 2)
		st.ET = append(st.ET, e)
	}
	return st, nil
}

// zoneDay sums one zone's steps, valve commands and reports of the day.
func zoneDay(rng store.RangeFunc, site string, cfg *config.Zone, offset float64, day time.Time) (Zone, error) {
	from, to := bounds(day, offset)
	z := Zone{Zone: cfg.ID, Station: cfg.Station, Alerts: []Alert{}, Plan: []Run{}}
	mine := func(p store.Point) bool { return p.Tags["site"] == site && p.Tags["zone"] == cfg.ID }
	// The depletion at the start: the last step before the day.
	err := rng(store.Filter{From: from.Add(-lookback), To: from, Measurements: []string{store.MeasurementZone}}, func(p store.Point) error {
		if v, ok := numField(p, "depletion_mm"); ok && mine(p) {
			z.DepletionStartMM = ptr(round(v, 1))
		}
		return nil
	})
	if err != nil {
		return z, fmt.Errorf("zone %s: %w", cfg.ID, err)
	}
	commanded := map[string]float64{}
	etcPot := 0.0
	type run struct{ minutes, volume float64 }
	reported := map[string]run{}
	err = rng(store.Filter{From: from, To: to, Measurements: []string{store.MeasurementZone, store.MeasurementCommand, store.MeasurementReport, store.MeasurementZoneAlert}}, func(p store.Point) error {
		if p.Measurement == store.MeasurementZoneAlert {
			if mine(p) {
				if a, ok := raised(p); ok {
					z.Alerts = append(z.Alerts, a)
				}
			}
			return nil
		}
		if !mine(p) {
			return nil
		}
		switch p.Measurement {
		case store.MeasurementZone:
			z.Steps++
			etc, _ := numField(p, "etc_mm")
			eff, _ := numField(p, "eff_rain_mm")
			z.ETcMM += etc
			z.EffRainMM += eff
			if ks, ok := numField(p, "ks"); ok && ks < 1 && p.Notes["kind"] == string(controllers.StepHour) {
				z.StressHours++
			}
			if p.Notes["kind"] == string(controllers.StepHour) {
				kc, _ := numField(p, "kc")
				et, _ := numField(p, "et_mm")
				etcPot += kc * et // FAO-56 eq. 56: the unstressed crop ET
			}
			if v, ok := numField(p, "depletion_mm"); ok {
				z.DepletionEndMM = ptr(round(v, 1))
			}
			if v, ok := numField(p, "raw_mm"); ok {
				z.RAWMM = ptr(round(v, 1))
			}
			if v, ok := numField(p, "taw_mm"); ok {
				z.TAWMM = ptr(round(v, 1))
			}
		case store.MeasurementCommand:
			if id := p.Notes["id"]; id != "" && p.Notes["outcome"] != "stop" {
				if v, ok := numField(p, "minutes"); ok {
					commanded[id] = v
				}
			}
		case store.MeasurementReport:
			id := p.Notes["id"]
			r := reported[id]
			if v, ok := numField(p, "minutes_run"); ok {
				r.minutes = max(r.minutes, v)
			}
			if v, ok := numField(p, "volume_l"); ok {
				r.volume = max(r.volume, v)
			}
			reported[id] = r
			if boolField(p, "credited") {
				v, _ := numField(p, "credit_mm")
				z.CreditedMM += v
			}
		}
		return nil
	})
	if err != nil {
		return z, fmt.Errorf("zone %s: %w", cfg.ID, err)
	}
	z.Commands = len(commanded)
	for _, v := range commanded {
		z.CommandedMin += v
	}
	for _, r := range reported {
		z.ReportedMin += r.minutes
		z.ReportedVolumeL += r.volume
	}
	deficitOf(&z, cfg, etcPot, from.In(fixed(offset)))
	z.ETcMM, z.EffRainMM, z.CreditedMM = round(z.ETcMM, 2), round(z.EffRainMM, 2), round(z.CreditedMM, 2)
	z.ReportedMin, z.ReportedVolumeL, z.CommandedMin = round(z.ReportedMin, 1), round(z.ReportedVolumeL, 0), round(z.CommandedMin, 1)
	return z, nil
}

// plan lists a zone's open commands, earliest first.
func plan(ledger []controllers.Command, zone string) []Run {
	out := []Run{}
	for _, c := range ledger {
		if c.Zone != zone || !c.State.Open() {
			continue
		}
		out = append(out, Run{ID: c.ID, Start: c.Start.UTC(), Minutes: c.Minutes, Cycle: c.Cycle, Cycles: c.Cycles, State: string(c.State)})
	}
	slices.SortFunc(out, func(a, b Run) int { return a.Start.Compare(b.Start) })
	return out
}

// raised returns the alert of an alert point that records a raise.
func raised(p store.Point) (Alert, bool) {
	if ev := p.Notes["event"]; ev != "" && ev != "raised" {
		return Alert{}, false
	}
	if !boolField(p, "active") {
		return Alert{}, false
	}
	return Alert{Time: p.Time.UTC(), Sensor: p.Tags["sensor"], Quantity: p.Tags["quantity"], Kind: p.Tags["kind"],
		Severity: p.Notes["severity"], Message: p.Notes["message"]}, true
}

func numField(p store.Point, k string) (float64, bool) {
	switch v := p.Fields[k].(type) {
	case float64:
		return v, !math.IsNaN(v) && !math.IsInf(v, 0)
	case int64:
		return float64(v), true
	}
	return 0, false
}

func boolField(p store.Point, k string) bool {
	v, _ := p.Fields[k].(bool)
	return v
}

func round(v float64, places int) float64 {
	f := math.Pow(10, float64(places))
	return math.Round(v*f) / f
}

func ptr(v float64) *float64 { return &v }

// deficitOf fills the day's deficit against the unstressed crop ET and,
// inside a grower's deficit stage, the intended deficit and stress.
func deficitOf(z *Zone, cfg *config.Zone, etcPot float64, localDay time.Time) {
	if etcPot > 0 {
		z.Deficit = ptr(round(math.Max(0, 1-z.ETcMM/etcPot), 3))
	}
	st := cfg.StageOn(localDay)
	if st == nil {
		return
	}
	z.Stage = st.Name
	z.IntendedStressHours = z.StressHours
	if st.Replace > 0 {
		z.IntendedDeficit = ptr(round(1-st.Replace, 3))
	}
}
