package controllers

import (
	"fmt"
	"math"
	"time"
)

// Forecast is the latest weather forecast of a site, as the integrator's
// automation publishes it: periods (hours or days) of reference ET, rain
// and its probability, and minimum air temperature, with the time the
// forecast was issued.
type Forecast struct {
	Issued  time.Time
	Periods []ForecastPeriod
}

// ForecastPeriod is one period [Start, End) of a forecast. A quantity the
// forecast does not give has its Has flag false.
type ForecastPeriod struct {
	Start, End time.Time
	ETo        float64 // reference ET over the period, mm
	HasETo     bool
	RainMM     float64 // rain over the period, mm
	RainProb   float64 // probability of that rain, 0-1
	MinTempC   float64 // minimum air temperature, °C
	HasMinTemp bool
}

// ForecastRules are a zone's uses of the site's forecast. The zero value
// uses no forecast.
type ForecastRules struct {
	// MaxAge: a forecast issued longer ago than this is ignored (with a
	// warning); 0 disables every use of the forecast.
	MaxAge time.Duration
	// RainMinMM and RainMinProb: forecast rain counts when its effective
	// amount before the next window starts is at least RainMinMM (mm) at a
	// probability of at least RainMinProb (0-1); it shortens the run by
	// that amount, or skips it when it covers the whole need. RainMinMM 0
	// disables the use of forecast rain.
	RainMinMM   float64
	RainMinProb float64
	// Frost holds a run while the forecast minimum temperature during the
	// window falls below the zone's frost limit (WeatherHolds.FrostC).
	Frost bool
}

// Validate reports an impossible rule.
func (r ForecastRules) Validate() error {
	if r.MaxAge < 0 || r.MaxAge > MaxForecastAgeHours*time.Hour {
		return fmt.Errorf("forecast max age: must be within 0-%d h, got %v: %w", MaxForecastAgeHours, r.MaxAge, ErrInput)
	}
	if !(r.RainMinMM >= 0 && r.RainMinMM <= MaxForecastRainMinMM) {
		return fmt.Errorf("forecast rain_min_mm: must be within 0-%g, got %v: %w", MaxForecastRainMinMM, r.RainMinMM, ErrInput)
	}
	if !(r.RainMinProb >= 0 && r.RainMinProb <= 1) {
		return fmt.Errorf("forecast rain_min_probability: must be within 0-1, got %v: %w", r.RainMinProb, ErrInput)
	}
	return nil
}

// Validate reports a forecast that cannot be used: no issue time, a period
// that ends before it starts, a negative amount or a probability outside
// 0-1.
func (f *Forecast) Validate() error {
	if f.Issued.IsZero() {
		return fmt.Errorf("forecast issued: missing: %w", ErrInput)
	}
	for i, p := range f.Periods {
		switch {
		case !p.End.After(p.Start):
			return fmt.Errorf("forecast period %d: end %v not after start %v: %w", i, p.End, p.Start, ErrInput)
		case !finite(p.RainMM) || p.RainMM < 0:
			return fmt.Errorf("forecast period %d: rain_mm: must be >= 0, got %v: %w", i, p.RainMM, ErrInput)
		case !(p.RainProb >= 0 && p.RainProb <= 1):
			return fmt.Errorf("forecast period %d: rain_probability: must be within 0-1, got %v: %w", i, p.RainProb, ErrInput)
		case p.HasETo && (!finite(p.ETo) || p.ETo < 0):
			return fmt.Errorf("forecast period %d: eto_mm: must be >= 0, got %v: %w", i, p.ETo, ErrInput)
		case p.HasMinTemp && !finite(p.MinTempC):
			return fmt.Errorf("forecast period %d: min_temp_c: not a number: %w", i, ErrInput)
		}
	}
	return nil
}

// ForecastProblem says why the zone ignores fc at now ("" when it uses it,
// or when it uses no forecast or none has arrived).
func (r ForecastRules) ForecastProblem(fc *Forecast, now time.Time) string {
	if r.MaxAge <= 0 || fc == nil {
		return ""
	}
	if fc.Issued.After(now) {
		return fmt.Sprintf("forecast issued %s is in the future: ignored", fc.Issued.UTC().Format(time.RFC3339))
	}
	if age := now.Sub(fc.Issued); age > r.MaxAge {
		return fmt.Sprintf("forecast issued %s is %v old, older than %v: ignored", fc.Issued.UTC().Format(time.RFC3339), age.Truncate(time.Minute), r.MaxAge)
	}
	return ""
}

// forecastFor returns fc when the zone uses forecasts and fc is fresh at
// now, else nil.
func (z *Zone) forecastFor(fc *Forecast, now time.Time) *Forecast {
	if z.Forecast.MaxAge <= 0 || fc == nil || z.Forecast.ForecastProblem(fc, now) != "" {
		return nil
	}
	return fc
}

// forecastLabel names the forecast in a reason.
func forecastLabel(fc *Forecast, loc *time.Location) string {
	return "forecast issued " + fc.Issued.In(loc).Format("2006-01-02 15:04")
}

// overlap returns the fraction of p inside [from, to).
func (p ForecastPeriod) overlap(from, to time.Time) float64 {
	s, e := p.Start, p.End
	if from.After(s) {
		s = from
	}
	if to.Before(e) {
		e = to
	}
	if !e.After(s) {
		return 0
	}
	return e.Sub(s).Hours() / p.End.Sub(p.Start).Hours()
}

// forecastETc returns the crop ET forecast over [from, to): Kc ETo (times
// the cover factor) of each period's share, FAO-56 eq. 56 with the
// forecast's ETo. ok is false unless periods with ETo cover the whole span.
func (z *Zone) forecastETc(fc *Forecast, from, to time.Time) (etc float64, ok bool) {
	cover := z.Cover
	if cover == 0 {
		cover = 1
	}
	var covered time.Duration
	for _, p := range fc.Periods {
		f := p.overlap(from, to)
		if f == 0 || !p.HasETo {
			continue
		}
		covered += time.Duration(f * float64(p.End.Sub(p.Start)))
		mid := p.Start.Add(p.End.Sub(p.Start) / 2)
		etc += z.Crop.KcOn(mid.In(z.Loc)) * p.ETo * f * cover // FAO-56 eq. 56
	}
	return etc, covered >= to.Sub(from)-time.Minute
}

// effectiveForecastRain is the effective part of r mm forecast over a
// period of h hours, by the zone's effective-rain method, taking the rain
// as spread evenly over the period (hourly threshold) or over its days
// (daily threshold): an assumption, common practice, no source.
func (e EffectiveRain) effectiveForecastRain(r, h float64) float64 {
	switch e.Method {
	case RainAll:
		return r
	case RainFractionAboveThreshold:
		return h * e.Of(r/h)
	case RainFractionAboveDailyThreshold:
		days := math.Max(1, h/24)
		return days * e.Fraction * math.Max(0, r/days-e.Threshold)
	}
	return 0
}

// forecastRain sums the effective forecast rain over [from, to) from the
// periods whose probability reaches the zone's RainMinProb.
func (z *Zone) forecastRain(fc *Forecast, from, to time.Time) float64 {
	var sum float64
	for _, p := range fc.Periods {
		f := p.overlap(from, to)
		if f == 0 || p.RainProb < z.Forecast.RainMinProb {
			continue
		}
		sum += z.Rain.effectiveForecastRain(p.RainMM, p.End.Sub(p.Start).Hours()) * f
	}
	return sum
}

// forecastFrost returns why a run in [from, to) is held for forecast
// frost, or "".
func (z *Zone) forecastFrost(fc *Forecast, from, to time.Time) string {
	fc = z.forecastFor(fc, from)
	if fc == nil || !z.Forecast.Frost || !z.Holds.HasFrost {
		return ""
	}
	for _, p := range fc.Periods {
		if p.HasMinTemp && p.overlap(from, to) > 0 && p.MinTempC < z.Holds.FrostC {
			return fmt.Sprintf("%s: minimum %.1f °C from %s below frost limit %.1f °C", forecastLabel(fc, z.Loc),
				p.MinTempC, p.Start.In(z.Loc).Format("2006-01-02 15:04"), z.Holds.FrostC)
		}
	}
	return ""
}

// forecastRainRecheck returns why a command planned but not yet sent (a
// later cycle, or one waiting for its source) is cancelled at its send for
// forecast rain, or "": the rain rule of planning (forecastNeed) applied
// at now to the zone's need now, so a forecast that came after the plan
// counts as frost does. A forecast the plan already saw does not cancel a
// cycle: the plan's water was the need less that rain, so the need before
// any of its cycles is more than the rain.
func (z *Zone) forecastRainRecheck(fc *Forecast, st *State, now time.Time) string {
	fc = z.forecastFor(fc, now)
	slot, ok := SlotAt(z.Windows, z.Loc, now)
	if fc == nil || !ok {
		return ""
	}
	lv := z.LevelsAt(st, now)
	_, _, skip := z.forecastNeed(fc, st, lv, now, slot, st.Depletion-lv.Target)
	return skip
}

// forecastNeed applies the forecast rain to a run's net need: rain expected
// (at RainMinProb or more) between now and the start of the next window
// occurrence after slot, when at least RainMinMM, shortens the need by its
// amount, or skips the run when it covers the need. A run is only skipped
// or shortened when, were the rain not to come, the depletion projected to
// the end of the next window (at the forecast crop ET, else the recent crop
// ET, else the worst case WorstCaseRefETPerDay) stays below TAW, so the next
// window can still water before the crop reaches the wilting point (common
// practice, no source). It returns the need, a note for the run's reason and, when the
// run is skipped, the skip's reason.
func (z *Zone) forecastNeed(fc *Forecast, st *State, lv Levels, now time.Time, slot Slot, need float64) (float64, string, string) {
	if fc == nil || z.Forecast.RainMinMM <= 0 || need <= 0 {
		return need, "", ""
	}
	nextStart := NextSlotStart(z.Windows, z.Loc, slot.Start)
	next, ok := SlotAt(z.Windows, z.Loc, nextStart)
	if !ok {
		return need, "", ""
	}
	rain := z.forecastRain(fc, now, next.Start)
	if rain < z.Forecast.RainMinMM {
		return need, "", ""
	}
	var dry float64
	worst := "" // the worst case stood in for the ET of the coming hours
	if etc, ok := z.forecastETc(fc, now, next.End); ok {
		dry = st.Depletion + etc
	} else if rate, _ := z.RecentETc(st, now); rate > 0 {
		dry = st.Depletion + rate*next.End.Sub(now).Hours()
	} else {
		// No forecast ETo and too short a record (a gateway started
		// today, no fallback ET): what waiting costs is bounded by the
		// worst-case reference ET instead.
		cover := z.Cover
		if cover == 0 {
			cover = 1
		}
		rate := z.Crop.KcOn(now.In(z.Loc)) * WorstCaseRefETPerDay / 24 * cover // FAO-56 eq. 56 with the worst-case ETo
		dry = st.Depletion + rate*next.End.Sub(now).Hours()
		worst = fmt.Sprintf(" (ET of the coming hours unknown: worst-case reference ET of %g mm/day assumed)", WorstCaseRefETPerDay)
	}
	label := forecastLabel(fc, z.Loc)
	if dry >= lv.TAW {
		return need, fmt.Sprintf("; %s: %.1f mm effective rain expected before %s not relied on (without it the depletion would reach %.1f mm, TAW %.1f mm%s)",
			label, rain, next.Start.In(z.Loc).Format("2006-01-02 15:04"), dry, lv.TAW, worst), ""
	}
	if rain >= need {
		return 0, "", fmt.Sprintf("%s: %.1f mm effective rain at probability >= %.0f %% expected before the next window (%s) covers the need of %.1f mm%s",
			label, rain, z.Forecast.RainMinProb*100, next.Start.In(z.Loc).Format("2006-01-02 15:04"), need, worst)
	}
	return need - rain, fmt.Sprintf("; shortened by %.1f mm of rain expected before %s (%s)%s", rain, next.Start.In(z.Loc).Format("2006-01-02 15:04"), label, worst), ""
}

// WorstCaseRefETPerDay is the reference ET, mm/day, that the forecast rain
// rule assumes for the hours until the next window ends when neither the
// forecast's ETo nor a day of applied hours tells it: above the highest
// regional mean ETo of FAO-56 Table 2 (about 8 mm/day for warm arid
// regions, from memory); the margin is common practice, no source.
const WorstCaseRefETPerDay = 15.0
