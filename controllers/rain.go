package controllers

import "fmt"

// RainMethod names how effective rain is derived from measured rain.
type RainMethod string

// The effective rain methods.
const (
	// RainAll counts all measured rain as effective.
	RainAll RainMethod = "all"
	// RainNone counts no rain (e.g. a greenhouse or a covered block).
	RainNone RainMethod = "none"
	// RainFractionAboveThreshold counts eff = f (P - P0) for P > P0 in each
	// hour, else 0: P0 is intercepted by the canopy or evaporates from the
	// surface, a fraction 1 - f runs off or is lost. Common practice, no
	// source; the parameters are the manager's.
	RainFractionAboveThreshold RainMethod = "fraction_above_threshold"
	// RainFractionAboveDailyThreshold counts eff = f (P - P0) with P the
	// rain of the standard-time day so far, applied hour by hour as the
	// day's total passes P0: a long drizzle is kept, where an hourly
	// threshold would lose it. A daily threshold is common practice, no
	// source (FAO-56 ch. 7 notes that small daily rains, below about 0.2
	// ETo, evaporate from the surface; from memory).
	RainFractionAboveDailyThreshold RainMethod = "fraction_above_daily_threshold"
)

// EffectiveRain derives effective rain (P - RO in FAO-56 eq. 85) from
// measured rain.
type EffectiveRain struct {
	Method    RainMethod
	Fraction  float64 // f, 0-1, for RainFractionAboveThreshold
	Threshold float64 // P0, mm per hour (RainFractionAboveThreshold) or per day (RainFractionAboveDailyThreshold)
}

// Validate reports an unknown method or impossible parameter.
func (e EffectiveRain) Validate() error {
	switch e.Method {
	case RainAll, RainNone:
		return nil
	case RainFractionAboveThreshold, RainFractionAboveDailyThreshold:
		if !(e.Fraction >= 0 && e.Fraction <= 1) || !(e.Threshold >= 0) {
			return fmt.Errorf("effective rain: need 0 <= fraction <= 1 and threshold >= 0, got %v/%v: %w", e.Fraction, e.Threshold, ErrInput)
		}
		return nil
	}
	return fmt.Errorf("effective rain method: unknown %q: %w", e.Method, ErrInput)
}

// Of returns the effective part of p mm of rain fallen in one hour.
func (e EffectiveRain) Of(p float64) float64 {
	if !(p > 0) {
		return 0
	}
	switch e.Method {
	case RainAll:
		return p
	case RainFractionAboveThreshold:
		if p > e.Threshold {
			return e.Fraction * (p - e.Threshold)
		}
	}
	return 0
}

// OfDay returns the change of the day's effective rain f (P - P0) when p mm
// (negative for a revision that lowers an hour) are added to a day that had
// received day mm: the hour's share under a daily threshold.
func (e EffectiveRain) OfDay(day, p float64) float64 {
	if !finite(p) || !finite(day) {
		return 0
	}
	above := func(v float64) float64 { return max(0, v-e.Threshold) }
	return e.Fraction * (above(day+p) - above(day))
}
