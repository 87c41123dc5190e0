package controllers

import (
	"fmt"
	"math"
	"time"
)

// Season is a crop coefficient curve by growth stage (FAO-56 chapter 6,
// Fig. 25): Kc ini through the initial stage, linear to Kc mid over the
// development stage, Kc mid through mid-season, linear to Kc end over the
// late stage (FAO-56 eq. 66). The season repeats every year from StartMonth
// and StartDay; it may run over the new year.
type Season struct {
	StartMonth time.Month
	StartDay   int
	// Stage lengths in days (FAO-56 Table 11 gives typical values).
	Initial, Development, Mid, Late int
	KcIni, KcMid, KcEnd             float64
	// OffSeason is the Kc used outside the season (before the start date or
	// after the late stage), e.g. a cover crop or bare soil evaporation.
	OffSeason float64
}

// Length is the season's length in days.
func (s Season) Length() int { return s.Initial + s.Development + s.Mid + s.Late }

// Day returns the 1-based day number within the season of the calendar date
// of t (in t's location) and whether that date lies within the season.
func (s Season) Day(t time.Time) (int, bool) {
	d := civilDay(t)
	y := t.Year()
	for _, yy := range []int{y, y - 1} {
		start := civilDay(time.Date(yy, s.StartMonth, s.StartDay, 0, 0, 0, 0, time.UTC))
		i := d - start + 1
		if i >= 1 && i <= s.Length() {
			return i, true
		}
	}
	return 0, false
}

// civilDay counts days since 1970-01-01 of t's calendar date in t's location.
func civilDay(t time.Time) int {
	y, m, d := t.Date()
	return int(time.Date(y, m, d, 0, 0, 0, 0, time.UTC).Unix() / 86400)
}

// KcAt returns Kc on season day i (1-based) by FAO-56 eq. 66:
// Kc,i = Kc,prev + [(i - ΣL_prev) / L_stage] (Kc,next - Kc,prev).
func (s Season) KcAt(i int) float64 {
	switch {
	case i < 1 || i > s.Length():
		return s.OffSeason
	case i <= s.Initial:
		return s.KcIni
	case i <= s.Initial+s.Development:
		return s.KcIni + float64(i-s.Initial)/float64(s.Development)*(s.KcMid-s.KcIni)
	case i <= s.Initial+s.Development+s.Mid:
		return s.KcMid
	default:
		prev := s.Initial + s.Development + s.Mid
		return s.KcMid + float64(i-prev)/float64(s.Late)*(s.KcEnd-s.KcMid)
	}
}

// Validate reports the first impossible value.
func (s Season) Validate() error {
	switch {
	case s.StartMonth < 1 || s.StartMonth > 12:
		return fmt.Errorf("season start month: must be 1-12, got %d: %w", s.StartMonth, ErrInput)
	case s.StartDay < 1 || s.StartDay > 31:
		return fmt.Errorf("season start day: must be 1-31, got %d: %w", s.StartDay, ErrInput)
	case s.Initial < 1 || s.Development < 1 || s.Mid < 1 || s.Late < 1:
		return fmt.Errorf("season stage lengths: each must be >= 1 day, got %d/%d/%d/%d: %w",
			s.Initial, s.Development, s.Mid, s.Late, ErrInput)
	case s.Length() > MaxSeasonDays:
		return fmt.Errorf("season length: must be <= %d days, got %d: %w", MaxSeasonDays, s.Length(), ErrInput)
	}
	for _, k := range []float64{s.KcIni, s.KcMid, s.KcEnd, s.OffSeason} {
		if !(k >= MinKc && k <= MaxKc) {
			return fmt.Errorf("season kc: must be within %g-%g, got %v: %w", MinKc, MaxKc, k, ErrInput)
		}
	}
	return nil
}

// Climate is the climate of the mid and late season used to adjust tabled
// Kc mid and Kc end (FAO-56 eq. 62 and 65).
type Climate struct {
	U2     float64 // mean daily wind speed at 2 m during the stage, m/s
	RHMin  float64 // mean daily minimum relative humidity during the stage, %
	Height float64 // mean plant height during the stage, m
}

// AdjustKc adjusts a tabled Kc mid (or Kc end) for climate by FAO-56 eq. 62
// (eq. 65 for Kc end, applied only when the tabled Kc end >= 0.45):
// Kc = Kc(Tab) + [0.04 (u2 - 2) - 0.004 (RHmin - 45)] (h/3)^0.3.
// As FAO-56 prescribes for the equation's validity, u2 is limited to 1-6 m/s,
// RHmin to 20-80 % and h to 0.1-10 m before use.
func (c Climate) AdjustKc(kcTab float64) float64 {
	u2 := clamp(c.U2, 1, 6)
	rh := clamp(c.RHMin, 20, 80)
	h := clamp(c.Height, 0.1, 10)
	return kcTab + (0.04*(u2-2)-0.004*(rh-45))*math.Pow(h/3, 0.3) // FAO-56 eq. 62
}

// Crop describes the crop coefficient of a zone.
type Crop struct {
	// Kc is the constant crop coefficient used when Season is nil.
	Kc float64
	// Season is the optional stage curve.
	Season *Season
	// Climate, when set, adjusts the season's Kc mid and Kc end (FAO-56 eq.
	// 62, 65) before the curve is evaluated.
	Climate *Climate
	// Canopy, when set, scales the full-cover Kc to the zone's partial
	// ground cover and crop height (Allen and Pereira 2009 density
	// coefficient, the form of FAO-56 eq. 98).
	Canopy *Canopy
}

// KcOn returns the crop coefficient on the calendar date of t (t in the
// station's standard time), adjusted for partial cover when a Canopy is set.
func (c Crop) KcOn(t time.Time) float64 {
	k := c.FullKcOn(t)
	if c.Canopy != nil {
		return c.Canopy.Adjust(k, t) // Allen and Pereira 2009; FAO-56 eq. 98 form
	}
	return k
}

// FullKcOn returns the crop coefficient at full cover on the date of t: the
// constant Kc or the season curve, climate-adjusted.
func (c Crop) FullKcOn(t time.Time) float64 {
	if c.Season == nil {
		return c.Kc
	}
	s := *c.Season
	if c.Climate != nil {
		s.KcMid = c.Climate.AdjustKc(s.KcMid) // FAO-56 eq. 62
		if s.KcEnd >= 0.45 {
			s.KcEnd = c.Climate.AdjustKc(s.KcEnd) // FAO-56 eq. 65
		}
	}
	i, _ := s.Day(t)
	return s.KcAt(i)
}

func clamp(v, lo, hi float64) float64 {
	if v < lo {
		return lo
	}
	if v > hi {
		return hi
	}
	return v
}
