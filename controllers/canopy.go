package controllers

import (
	"fmt"
	"math"
	"time"
)

// Partial cover: the density-coefficient method of Allen and Pereira (2009,
// "Estimating crop coefficients from fraction of ground cover and height",
// Irrigation Science 28:17-34), which formalises FAO-56 chapter 9 eq. 98:
//
//	Kd = min(1, ML fc,eff, fc,eff^(1/(1+h)))
//	Kc = Kc,soil + Kd (Kc,full - Kc,soil)
//
// fc,eff is the fraction of the ground shaded (covered) by the canopy near
// solar noon, h the crop height in m, ML a multiplier on fc,eff describing
// the most the canopy can transpire per unit of cover (FAO-56 eq. 98 uses 2;
// Allen and Pereira give 1.5-2.0), Kc,full the crop coefficient of the same
// crop at full cover (the tabled curve) and Kc,soil the coefficient of the
// bare soil between plants (FAO-56 Kc min, 0.15-0.20). Equation numbers and
// ranges are from memory.
const (
	// DefaultML is the ML multiplier used when none is set (FAO-56 eq. 98's
	// factor 2 on fc; from memory).
	DefaultML = 2.0
	// DefaultKcSoil is the bare-soil coefficient used when none is set
	// (FAO-56 chapter 9, Kc min 0.15-0.20 for bare soil; from memory).
	DefaultKcSoil = 0.15
	// MinML and MaxML bound ML (Allen and Pereira 2009 give 1.5-2.0; from
	// memory; the bounds leave room either side, common practice, no source).
	MinML, MaxML = 1.0, 3.0
	// MaxCropHeight bounds the crop height, m (common practice, no source).
	MaxCropHeight = 30.0
)

// CoverPoint is the canopy's ground cover on one date of each year.
type CoverPoint struct {
	Month time.Month
	Day   int
	// Fc is the fraction of the ground shaded by the canopy near solar
	// noon, 0-1.
	Fc float64
}

// Canopy describes a partial cover for the density-coefficient method.
type Canopy struct {
	// Cover is the ground cover through the year: one point is a constant;
	// more are interpolated linearly by date (round the year: after the
	// last point the cover runs towards the first point of the next year).
	Cover []CoverPoint
	// Height is the mean crop height, m.
	Height float64
	// ML is the multiplier on fc; 0 means DefaultML.
	ML float64
	// KcSoil is the coefficient of the bare soil between plants; use
	// DefaultKcSoil when unsure.
	KcSoil float64
}

// DensityCoefficient returns Kd = min(1, ML fc, fc^(1/(1+h))) (Allen and
// Pereira 2009, the form of FAO-56 eq. 98; from memory).
func DensityCoefficient(fc, h, ml float64) float64 {
	fc = clamp(fc, 0, 1)
	return math.Min(1, math.Min(ml*fc, math.Pow(fc, 1/(1+h))))
}

// CoverOn returns the ground cover on the calendar date of t.
func (c Canopy) CoverOn(t time.Time) float64 {
	n := len(c.Cover)
	if n == 0 {
		return 1
	}
	if n == 1 {
		return c.Cover[0].Fc
	}
	doy := func(m time.Month, d int) int {
		return time.Date(2001, m, d, 0, 0, 0, 0, time.UTC).YearDay() // a year without 29 Feb
	}
	y, m, d := t.Date()
	today := doy(m, d)
	if m == time.February && d == 29 && y%4 == 0 {
		today = doy(time.February, 28)
	}
	// Find the last point on or before today (round the year) and the next.
	prev, next := n-1, 0
	for i, p := range c.Cover {
		if doy(p.Month, p.Day) <= today {
			prev, next = i, (i+1)%n
		}
	}
	a, b := doy(c.Cover[prev].Month, c.Cover[prev].Day), doy(c.Cover[next].Month, c.Cover[next].Day)
	span, into := b-a, today-a
	if span <= 0 {
		span += 365
	}
	if into < 0 {
		into += 365
	}
	return c.Cover[prev].Fc + float64(into)/float64(span)*(c.Cover[next].Fc-c.Cover[prev].Fc)
}

// Kd returns the density coefficient on the calendar date of t.
func (c Canopy) Kd(t time.Time) float64 {
	ml := c.ML
	if ml == 0 {
		ml = DefaultML
	}
	return DensityCoefficient(c.CoverOn(t), c.Height, ml)
}

// Adjust returns the Kc of the partial cover on the date of t for a
// full-cover Kc (Allen and Pereira 2009; FAO-56 eq. 98 form): Kc,soil +
// Kd (Kc,full - Kc,soil). A full-cover Kc at or below Kc,soil (a bare
// off-season) is kept as it is.
func (c Canopy) Adjust(kcFull float64, t time.Time) float64 {
	if kcFull <= c.KcSoil {
		return kcFull
	}
	return c.KcSoil + c.Kd(t)*(kcFull-c.KcSoil)
}

// Validate reports the first impossible value.
func (c Canopy) Validate() error {
	if len(c.Cover) == 0 {
		return fmt.Errorf("canopy cover: at least one value is required: %w", ErrInput)
	}
	for i, p := range c.Cover {
		if !(p.Fc > 0 && p.Fc <= 1) {
			return fmt.Errorf("canopy cover[%d]: must be within (0, 1], got %v: %w", i, p.Fc, ErrInput)
		}
		if i > 0 && !dateAfter(p.Month, p.Day, c.Cover[i-1].Month, c.Cover[i-1].Day) {
			return fmt.Errorf("canopy cover[%d]: dates must increase within the year, got %02d-%02d after %02d-%02d: %w",
				i, p.Month, p.Day, c.Cover[i-1].Month, c.Cover[i-1].Day, ErrInput)
		}
	}
	switch {
	case !(c.Height > 0 && c.Height <= MaxCropHeight):
		return fmt.Errorf("canopy height: must be within (0, %g] m, got %v: %w", MaxCropHeight, c.Height, ErrInput)
	case c.ML != 0 && !(c.ML >= MinML && c.ML <= MaxML):
		return fmt.Errorf("canopy ml: must be within %g-%g, got %v: %w", MinML, MaxML, c.ML, ErrInput)
	case !(c.KcSoil >= 0 && c.KcSoil <= 1):
		return fmt.Errorf("canopy kc soil: must be within 0-1, got %v: %w", c.KcSoil, ErrInput)
	}
	return nil
}

func dateAfter(m time.Month, d int, pm time.Month, pd int) bool {
	return m > pm || (m == pm && d > pd)
}

// Wetted fractions of the soil by system type when the grower asks for the
// typical value: FAO-56 Table 20 gives trickle (drip) 0.3-0.4 and sprinkler
// 1.0 (from memory); the midpoint is used for drip. Table 20 lists no
// micro-sprinkler value, so those zones must give theirs.
var TypicalWettedFraction = map[SystemKind]float64{Drip: 0.35, Sprinkler: 1.0}

// EmitterWettedFraction returns the fraction of a plant's area wetted by its
// emitters: emitters x π d²/4 / plant area, at most 1, d the wetted diameter
// of one emitter in m. Common practice, no source (overlapping wetted
// circles make it an upper bound).
func EmitterWettedFraction(perPlant int, diameter, plantArea float64) (float64, error) {
	if perPlant < 1 || !(diameter > 0) || !(plantArea > 0) || math.IsInf(diameter, 0) {
		return 0, fmt.Errorf("wetted fraction: need emitters per plant >= 1, wetted diameter > 0 and plant area > 0, got %d, %v m, %v m2: %w", perPlant, diameter, plantArea, ErrInput)
	}
	return math.Min(1, float64(perPlant)*math.Pi*diameter*diameter/4/plantArea), nil
}
