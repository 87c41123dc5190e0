package controllers

import (
	"fmt"
	"math"
	"sort"
	"time"

	"etpulse/hourly"
)

// KeepHours is how long the applied values of each hour are kept in a
// zone's State so that a revised hour can be applied as a difference, and
// recent rain, wind and temperature can be looked up for weather holds.
const KeepHours = 72

// FailSafe says what a zone does when its station stops producing valid ET.
type FailSafe struct {
	// MaxMissingHours is how many hours without valid ET are tolerated
	// (contributing no ET) before the zone is stale: it then holds (no new
	// commands) or, with Fallback, uses FallbackET. Stale always alerts.
	MaxMissingHours int
	// Fallback enables FallbackET once the zone is stale.
	Fallback bool
	// FallbackET is the reference ET per month, January first, mm/day,
	// spread evenly over the 24 hours of a day (1/24 per hour).
	FallbackET [12]float64
}

// Zone holds everything the balance and the decisions need to know about one
// irrigation zone. Build it once from configuration; it is read-only.
type Zone struct {
	ID     string
	Valve  string
	Source string         // water source id; "" for an unshared source
	Area   float64        // m2
	Loc    *time.Location // the station's standard time (fixed offset, no DST)

	Crop Crop
	// Cover is a greenhouse cover transmission factor (0-1] applied to the
	// reference ET of an outside station; 0 means 1 (no cover). It scales ET
	// as a whole, an approximation that holds because radiation dominates ET
	// under cover; a station inside the greenhouse needs no factor.
	Cover float64
	Soil  Soil
	Rain  EffectiveRain

	System  System
	Windows []Window
	Holds   WeatherHolds
	Policy  CommandPolicy

	FailSafe FailSafe

	// Stages are the grower's deficit stages (regulated deficit or a
	// stage's management-allowed depletion); none: full demand all year.
	Stages []DeficitStage
	// Salinity gives the leaching requirement added to each run; the zero
	// value (no water EC) adds none.
	Salinity Salinity
	// Probes are the zone's soil-moisture probes (nil: none); see FuseProbes.
	Probes *ProbeSet
	// Forecast says how the site's forecast is used; the zero value uses
	// none.
	Forecast ForecastRules
}

// Validate reports the first impossible parameter.
func (z *Zone) Validate() error {
	if z.Area <= 0 || math.IsInf(z.Area, 0) {
		return fmt.Errorf("zone %s: area: must be > 0 m2, got %v: %w", z.ID, z.Area, ErrInput)
	}
	if z.Loc == nil {
		return fmt.Errorf("zone %s: location: missing: %w", z.ID, ErrInput)
	}
	if z.Cover < 0 || z.Cover > 1 {
		return fmt.Errorf("zone %s: cover: must be within 0-1, got %v: %w", z.ID, z.Cover, ErrInput)
	}
	if z.Crop.Season != nil {
		if err := z.Crop.Season.Validate(); err != nil {
			return fmt.Errorf("zone %s: %w", z.ID, err)
		}
	} else if !(z.Crop.Kc >= MinKc && z.Crop.Kc <= MaxKc) {
		return fmt.Errorf("zone %s: kc: must be within %g-%g, got %v: %w", z.ID, MinKc, MaxKc, z.Crop.Kc, ErrInput)
	}
	for _, err := range []error{z.Soil.Validate(), z.Rain.Validate(), z.System.Validate()} {
		if err != nil {
			return fmt.Errorf("zone %s: %w", z.ID, err)
		}
	}
	if z.Crop.Canopy != nil {
		if err := z.Crop.Canopy.Validate(); err != nil {
			return fmt.Errorf("zone %s: %w", z.ID, err)
		}
	}
	for _, d := range z.Stages {
		if err := d.Validate(); err != nil {
			return fmt.Errorf("zone %s: %w", z.ID, err)
		}
	}
	if err := z.Salinity.Validate(); err != nil {
		return fmt.Errorf("zone %s: %w", z.ID, err)
	}
	if z.Probes != nil {
		if err := z.Probes.Validate(z.Soil); err != nil {
			return fmt.Errorf("zone %s: %w", z.ID, err)
		}
	}
	if err := z.Forecast.Validate(); err != nil {
		return fmt.Errorf("zone %s: %w", z.ID, err)
	}
	if len(z.Windows) == 0 {
		return fmt.Errorf("zone %s: windows: at least one is required: %w", z.ID, ErrInput)
	}
	if z.FailSafe.MaxMissingHours < MinMissingHours || z.FailSafe.MaxMissingHours > MaxMissingHoursCap {
		return fmt.Errorf("zone %s: max missing hours: must be %d-%d, got %d: %w", z.ID, MinMissingHours, MaxMissingHoursCap, z.FailSafe.MaxMissingHours, ErrInput)
	}
	for i, v := range z.FailSafe.FallbackET {
		if !(v >= 0 && v <= MaxFallbackET) || (z.FailSafe.Fallback && v == 0) {
			return fmt.Errorf("zone %s: fallback ET for month %d: must be within 0-%g mm/day (and > 0 when fallback is on), got %v: %w", z.ID, i+1, MaxFallbackET, v, ErrInput)
		}
	}
	return z.Policy.Validate()
}

// HourEntry is what a zone applied for one station hour.
type HourEntry struct {
	Start    time.Time `json:"start"`
	Revision int       `json:"revision"`
	Valid    bool      `json:"valid"`    // the station produced ET for the hour
	Fallback bool      `json:"fallback"` // fallback ET was used
	ET       float64   `json:"et"`       // reference ET used (after cover), mm
	Kc       float64   `json:"kc"`
	Ks       float64   `json:"ks"`
	ETc      float64   `json:"etc"`      // Ks Kc ET applied to the balance, mm
	ETcPot   float64   `json:"etc_pot"`  // Kc ET, mm
	Rain     float64   `json:"rain"`     // measured rain, mm
	EffRain  float64   `json:"eff_rain"` // effective rain applied, mm
	Drainage float64   `json:"drainage"` // deep percolation counted in this hour's steps, mm
	Wind2    float64   `json:"wind2"`    // mean wind at 2 m, m/s (when HasWind)
	AirTemp  float64   `json:"air_temp"` // mean air temperature, °C (when HasTemp)
	HasWind  bool      `json:"has_wind"`
	HasTemp  bool      `json:"has_temp"`
}

// State is a zone's persistent balance state.
type State struct {
	// Depletion is the root-zone depletion Dr, mm below field capacity.
	Depletion float64 `json:"depletion"`
	// Hours are the applied hours of the last KeepHours, oldest first.
	Hours []HourEntry `json:"hours"`
	// Probe is the probes' fusion and watch state (nil: no probes).
	Probe *ProbeState `json:"probe,omitempty"`
	// LastValid is the end of the latest hour with valid ET (zero: never).
	LastValid time.Time `json:"last_valid"`
	// EtcSinceRun is the crop ET applied since the last credited irrigation, mm.
	EtcSinceRun float64 `json:"etc_since_run"`
}

// HourInput is one station hour as the balance needs it.
type HourInput struct {
	Start, End time.Time
	Revision   int
	Valid      bool    // false when the station produced no ET for the hour
	ET         float64 // reference ET over the hour, mm (when Valid)
	Rain       float64 // measured rain over the hour, mm
	Wind2      float64 // m/s at 2 m (when HasWind)
	AirTemp    float64 // °C (when HasTemp)
	HasWind    bool
	HasTemp    bool
	// Fill names the gap-filling method behind ET (e.g. a Hargreaves-Samani
	// radiation estimate for an excluded pyranometer); empty when the ET
	// came from the hour's own measurements.
	Fill string
}

// InputFromRecord converts a station-hour record. Wind and temperature for
// the weather holds come from the sample statistics, so an incomplete hour
// still has them when its sensors reported; the wind is the record's 2 m
// wind when the hour is complete, else the mean at the sensor's height
// (usually above 2 m, so the wind hold errs on the safe side).
func InputFromRecord(rec hourly.Record) HourInput {
	in := HourInput{
		Start:    rec.Start,
		End:      rec.End,
		Revision: rec.Revision,
		Rain:     rec.Rain,
	}
	if st := rec.Stats[hourly.AirTemp]; st.Count > 0 {
		in.AirTemp, in.HasTemp = st.Mean, true
	}
	if st := rec.Stats[hourly.Wind]; st.Count > 0 {
		in.Wind2, in.HasWind = st.Mean, true
	}
	if rec.Complete && rec.Result != nil {
		in.Valid = true
		in.ET = rec.Result.ET
		in.Wind2 = rec.Inputs.Wind2
		in.Fill = rec.Fill
	}
	return in
}

// StepKind tells what produced a Step.
type StepKind string

// The kinds of steps.
const (
	StepHour   StepKind = "hour"   // a closed (or revised) station hour
	StepCredit StepKind = "credit" // reported irrigation credited
)

// Step is the record of one change of a zone's balance. For a revised hour
// ET, ETc, Rain and EffRain hold the change applied (new minus previous), so
// the sum of a quantity over all steps is its true total.
type Step struct {
	Zone      string
	Kind      StepKind
	Start     time.Time // hour start; for a credit, the time it was credited
	End       time.Time // hour end; for a credit, equal to Start
	Revision  int
	CommandID string // for a credit

	ET         float64 // reference ET used (after any cover factor), mm
	Kc         float64
	Ks         float64 // FAO-56 eq. 84
	P          float64 // depletion fraction used
	ETc        float64 // Ks Kc ET applied, mm (FAO-56 eq. 80/81)
	Rain       float64 // measured rain, mm
	EffRain    float64 // effective rain, mm
	Irrigation float64 // net irrigation credited, mm
	Depletion  float64 // Dr after the step, mm
	Drainage   float64 // deep percolation DP, mm (FAO-56 eq. 88); negative when a revision takes back drainage of its hour
	Adjust     float64 // depletion dropped because TAW shrank below Dr (root depth fell), mm
	TAW        float64 // FAO-56 eq. 82
	RAW        float64 // FAO-56 eq. 83

	Missing  bool // the station produced no ET for the hour; none was applied
	Fallback bool // fallback ET was used for the hour
	// Fill is the gap-filling method behind the hour's ET (HourInput.Fill),
	// empty when none: the step is driven by an estimate, and says so.
	Fill string

	// Stage is the deficit stage in force for the hour ("" when none).
	Stage string
	// Intended marks a stressed hour (Ks < 1) inside a deficit stage: the
	// stress is what the grower asked for, not a watering shortfall.
	Intended bool
	// Leach is the part of Drainage that is the leaching fraction of the
	// irrigation credited (FAO-29 leaching requirement), mm.
	Leach float64

	// Hour holds the hour's totals after this step (for a first emission
	// the same values as the step); a store that overwrites the hour's
	// point by time keeps these.
	Hour HourEntry
	// Probe is the probes' correction of the depletion after the hour
	// (nil: no probe estimate); Depletion already includes it.
	Probe *ProbeFusion
}

// Levels are a zone's thresholds at one moment.
type Levels struct {
	Zr      float64 // root depth, m
	TAW     float64 // mm
	P       float64
	RAW     float64 // mm
	Trigger float64 // depletion that triggers irrigation, mm
	Target  float64 // depletion to leave after irrigation, mm
	// Stage is the deficit stage in force (nil when none): its MAD sets
	// Trigger, its replacement fraction limits each run.
	Stage *DeficitStage
}

// LevelsAt returns the zone's thresholds at t given its recent hours.
func (z *Zone) LevelsAt(st *State, t time.Time) Levels {
	lt := t.In(z.Loc)
	var l Levels
	l.Zr = z.Soil.RootDepth(z.Crop.Season, lt)
	l.TAW = z.Soil.TAW(l.Zr)          // FAO-56 eq. 82
	l.P = z.Soil.PFor(st.dailyETc(t)) // FAO-56 Table 22 footnote
	l.RAW = RAW(l.P, l.TAW)           // FAO-56 eq. 83
	l.Trigger = l.RAW
	if z.Soil.TriggerMM > 0 {
		l.Trigger = math.Min(z.Soil.TriggerMM, l.TAW)
	}
	l.Stage = z.StageAt(t)
	if l.Stage != nil && l.Stage.MAD > 0 {
		l.Trigger = l.Stage.MAD * l.TAW // management-allowed depletion of the stage
	}
	l.Target = z.Soil.RefillFraction * l.RAW
	if l.Target > l.Trigger {
		l.Target = l.Trigger
	}
	return l
}

// dailyETc estimates the crop ET (Kc ETo, unstressed) of the 24 hours before
// t, mm/day, from at least 12 applied hours; -1 when too few are known.
func (st *State) dailyETc(t time.Time) float64 {
	var sum float64
	n := 0
	for _, h := range st.Hours {
		if !h.Start.Before(t.Add(-24*time.Hour)) && h.Start.Before(t) && (h.Valid || h.Fallback) {
			sum += h.ETcPot
			n++
		}
	}
	if n < 12 {
		return -1
	}
	return sum * 24 / float64(n)
}

// Stale reports whether the zone has had no valid ET for longer than its
// tolerance at now (also when it never had any).
func (z *Zone) Stale(st *State, now time.Time) bool {
	return st.LastValid.IsZero() || now.Sub(st.LastValid) > time.Duration(z.FailSafe.MaxMissingHours)*time.Hour
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// StepHour applies one closed station hour to the balance (FAO-56 eq. 85):
// Dr,i = Dr,i-1 - (P - RO)i - Ii + ETc,i + DPi, with ETc = Ks Kc ET (eq. 80,
// 81), Ks by eq. 84 from the depletion at the start of the hour, Dr kept
// within [0, TAW] and water above field capacity counted as deep percolation
// DP (eq. 88). A revision applies the difference against what was applied for
// that hour before, with the Kc and Ks used then; water it takes away is
// taken first from the hour's drainage. It reports false (and no
// error) for a revision not newer than the one applied, or an hour older than
// the kept window.
func (z *Zone) StepHour(st *State, in HourInput) (Step, bool, error) {
	if in.Start.IsZero() || !in.End.After(in.Start) {
		return Step{}, false, fmt.Errorf("step zone %s: hour %v-%v: end must follow start: %w", z.ID, in.Start, in.End, ErrInput)
	}
	if !finite(in.Rain) || in.Rain < 0 {
		return Step{}, false, fmt.Errorf("step zone %s: rain: must be >= 0, got %v: %w", z.ID, in.Rain, ErrInput)
	}
	if in.Valid && !finite(in.ET) {
		return Step{}, false, fmt.Errorf("step zone %s: et: must be finite, got %v: %w", z.ID, in.ET, ErrInput)
	}
	idx := sort.Search(len(st.Hours), func(i int) bool { return !st.Hours[i].Start.Before(in.Start) })
	var prev *HourEntry
	if idx < len(st.Hours) && st.Hours[idx].Start.Equal(in.Start) {
		prev = &st.Hours[idx]
		if in.Revision <= prev.Revision {
			return Step{}, false, nil
		}
	} else if n := len(st.Hours); n > 0 && in.Start.Before(st.Hours[n-1].Start.Add(-KeepHours*time.Hour)) {
		return Step{}, false, nil
	}

	lt := in.Start.In(z.Loc)
	lv := z.LevelsAt(st, in.Start)
	s := Step{Zone: z.ID, Kind: StepHour, Start: in.Start, End: in.End, Revision: in.Revision, TAW: lv.TAW, RAW: lv.RAW, P: lv.P}
	if st.Depletion > lv.TAW {
		s.Adjust = st.Depletion - lv.TAW
		st.Depletion = lv.TAW
	}
	cover := z.Cover
	if cover == 0 {
		cover = 1
	}
	e := HourEntry{Start: in.Start, Revision: in.Revision, Valid: in.Valid, Rain: in.Rain,
		Wind2: in.Wind2, AirTemp: in.AirTemp, HasWind: in.HasWind, HasTemp: in.HasTemp}
	switch {
	case in.Valid:
		// Negative hourly ET (dew) is not credited as water: common practice, no source.
		e.ET = math.Max(0, in.ET) * cover
	case z.FailSafe.Fallback && (st.LastValid.IsZero() || in.End.Sub(st.LastValid) > time.Duration(z.FailSafe.MaxMissingHours)*time.Hour):
		e.ET = z.FailSafe.FallbackET[lt.Month()-1] / 24 * cover
		e.Fallback = true
	}
	e.Kc = z.Crop.KcOn(lt)
	e.Ks = Ks(st.Depletion, lv.TAW, lv.P) // FAO-56 eq. 84
	if prev != nil {
		e.Kc, e.Ks = prev.Kc, prev.Ks
	}
	e.ETcPot = e.Kc * e.ET
	etc := e.Ks * e.ETcPot // FAO-56 eq. 81
	eff := z.Rain.Of(in.Rain)
	if z.Rain.Method == RainFractionAboveDailyThreshold {
		// The day's effective rain moves by what this hour (or its
		// revision) adds to the day's total above the threshold.
		prevRain, prevEff := 0.0, 0.0
		if prev != nil {
			prevRain, prevEff = prev.Rain, prev.EffRain
		}
		eff = prevEff + z.Rain.OfDay(st.rainOfDay(in.Start, z.Loc), in.Rain-prevRain)
	}
	dETc, dEff, dRain, dET := etc, eff, in.Rain, e.ET
	if prev != nil {
		dETc, dEff, dRain, dET = etc-prev.ETc, eff-prev.EffRain, in.Rain-prev.Rain, e.ET-prev.ET
	}
	d := st.Depletion + dETc - dEff // FAO-56 eq. 85
	if up := dETc - dEff; prev != nil && prev.Drainage > 0 && up > 0 {
		// The hour drained: the soil was at field capacity at its end, so
		// the water the revision takes away first comes out of what
		// drained (a negative drainage step), and only the rest out of the
		// soil (FAO-56 eq. 88).
		u := math.Min(up, prev.Drainage)
		s.Drainage = -u
		d -= u
	}
	if d > lv.TAW {
		// The crop cannot extract water that is not there.
		dETc -= d - lv.TAW
		d = lv.TAW
	}
	if d < 0 {
		s.Drainage = -d // FAO-56 eq. 88: water above field capacity percolates
		d = 0
	}
	st.Depletion = d
	st.EtcSinceRun += dETc
	e.ETc = dETc
	e.EffRain = eff
	e.Drainage = s.Drainage
	if prev != nil {
		e.ETc = prev.ETc + dETc
		e.Drainage += prev.Drainage
		*prev = e
	} else {
		st.Hours = append(st.Hours, HourEntry{})
		copy(st.Hours[idx+1:], st.Hours[idx:])
		st.Hours[idx] = e
	}
	if in.Valid && in.End.After(st.LastValid) {
		st.LastValid = in.End
	}
	st.prune()

	s.ET, s.Kc, s.Ks, s.ETc, s.Rain, s.EffRain = dET, e.Kc, e.Ks, dETc, dRain, dEff
	s.Depletion = d
	if lv.Stage != nil {
		s.Stage = lv.Stage.Name
		s.Intended = e.Ks < 1
	}
	s.Fallback = e.Fallback
	s.Missing = !in.Valid && !e.Fallback
	if in.Valid {
		s.Fill = in.Fill
	}
	s.Hour = e
	return s, true, nil
}

func (st *State) prune() {
	n := len(st.Hours)
	if n == 0 {
		return
	}
	cut := st.Hours[n-1].Start.Add(-KeepHours * time.Hour)
	i := 0
	for i < n && st.Hours[i].Start.Before(cut) {
		i++
	}
	st.Hours = append(st.Hours[:0], st.Hours[i:]...)
}

// Credit applies mm of net irrigation reported for command id at t: the
// depletion falls, water above field capacity percolates (FAO-56 eq. 85, 88),
// and the crop ET since the last run restarts from zero. With saline water
// the leaching fraction LR of the water passes below the root zone at once
// (FAO-29 leaching requirement): only (1 - LR) mm refill the soil.
func (z *Zone) Credit(st *State, id string, mm float64, t time.Time) (Step, error) {
	if !finite(mm) || mm < 0 {
		return Step{}, fmt.Errorf("credit zone %s: irrigation: must be >= 0 mm, got %v: %w", z.ID, mm, ErrInput)
	}
	lv := z.LevelsAt(st, t)
	s := Step{Zone: z.ID, Kind: StepCredit, Start: t, End: t, CommandID: id, Irrigation: mm,
		TAW: lv.TAW, RAW: lv.RAW, P: lv.P, Ks: Ks(st.Depletion, lv.TAW, lv.P), Kc: z.Crop.KcOn(t.In(z.Loc))}
	if st.Depletion > lv.TAW {
		s.Adjust = st.Depletion - lv.TAW
		st.Depletion = lv.TAW
	}
	if lr := z.Salinity.LeachingRequirement(); lr > 0 {
		s.Leach = mm * lr
		s.Drainage = s.Leach
	}
	d := st.Depletion - (mm - s.Leach) // FAO-56 eq. 85
	if d < 0 {
		s.Drainage += -d // FAO-56 eq. 88
		d = 0
	}
	st.Depletion = d
	st.EtcSinceRun = 0
	s.Depletion = d
	if lv.Stage != nil {
		s.Stage = lv.Stage.Name
	}
	return s, nil
}

// RecentWeather summarises the hours applied within lookback before now.
type RecentWeather struct {
	Rain    float64 // measured rain sum, mm
	Wind2   float64 // latest hour's mean wind at 2 m, m/s
	AirTemp float64 // latest hour's mean air temperature, °C
	HasWind bool
	HasTemp bool
	// Raining: the latest hour (within the last two) had rain.
	Raining bool
}

// Recent returns the rain of the hours starting within lookback before now,
// whether the latest hour had rain, and the wind and temperature of the
// latest hour that has them (within the last three hours; older values are
// not used).
func (st *State) Recent(now time.Time, lookback time.Duration) RecentWeather {
	var w RecentWeather
	for _, h := range st.Hours {
		if !h.Start.Before(now.Add(-lookback)) && h.Start.Before(now) {
			w.Rain += h.Rain
		}
		if h.Start.Before(now) && !h.Start.Before(now.Add(-2*time.Hour)) {
			w.Raining = h.Rain > 0
		}
		if h.Start.Before(now) && !h.Start.Before(now.Add(-3*time.Hour)) {
			if h.HasWind {
				w.Wind2, w.HasWind = h.Wind2, true
			}
			if h.HasTemp {
				w.AirTemp, w.HasTemp = h.AirTemp, true
			}
		}
	}
	return w
}

// recentHours is the span of applied hours RecentETc averages over, and
// minRecentHours the fewest it accepts.
const (
	recentHours    = KeepHours * time.Hour
	minRecentHours = 24
)

// RecentETc returns the crop ET rate expected for the coming hours, mm/h,
// and how it was found: the mean hourly Kc ETo (unstressed, after any cover
// factor) of the applied hours of the last 72 h, when at least 24 of them
// had valid or fallback ET, else the month's fallback ET times the current
// Kc when the zone has a fallback table; 0 when neither is known (the zone
// then waters on its trigger alone). A mean over the last days as the
// forecast of the next is common practice, no source.
func (z *Zone) RecentETc(st *State, now time.Time) (float64, string) {
	var sum float64
	n := 0
	for _, h := range st.Hours {
		if !h.Start.Before(now.Add(-recentHours)) && h.Start.Before(now) && (h.Valid || h.Fallback) {
			sum += h.ETcPot
			n++
		}
	}
	if n >= minRecentHours {
		return sum / float64(n), fmt.Sprintf("mean Kc ETo of the last %d h", n)
	}
	if z.FailSafe.Fallback {
		lt := now.In(z.Loc)
		cover := z.Cover
		if cover == 0 {
			cover = 1
		}
		return z.Crop.KcOn(lt) * z.FailSafe.FallbackET[lt.Month()-1] / 24 * cover, "Kc times the month's fallback ET"
	}
	return 0, ""
}

// rainOfDay sums the measured rain of the applied hours of t's
// standard-time day.
func (st *State) rainOfDay(t time.Time, loc *time.Location) float64 {
	lt := t.In(loc)
	day := time.Date(lt.Year(), lt.Month(), lt.Day(), 0, 0, 0, 0, loc)
	var sum float64
	for _, h := range st.Hours {
		if !h.Start.Before(day) && h.Start.Before(day.AddDate(0, 0, 1)) {
			sum += h.Rain
		}
	}
	return sum
}
