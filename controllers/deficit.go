package controllers

import (
	"fmt"
	"time"
)

// DeficitStage is a period of the year, named by the grower (e.g.
// "pit hardening", "post-harvest"), in which the zone is watered on
// purpose below full demand: with a management-allowed depletion (MAD)
// above the crop's p, or by replacing only a fraction of the crop ET
// (regulated deficit irrigation), or both. Stress the stage causes is
// intended and reported apart from unintended stress.
type DeficitStage struct {
	Name string
	// From and To are the first and last day of the stage each year; the
	// stage may run over the new year.
	FromMonth, ToMonth time.Month
	FromDay, ToDay     int
	// MAD, when > 0, is the fraction of TAW that may be depleted before
	// irrigation in the stage; it replaces the trigger (RAW or trigger_mm).
	MAD float64
	// Replace, when > 0, is the fraction of the crop ET since the last run
	// that a run puts back (0 < Replace <= 1); 0 replaces all.
	Replace float64
}

// MaxMAD bounds a stage's management-allowed depletion: at most 0.9 of TAW
// (common practice, no source: the crop wilts well before TAW is used).
const MaxMAD = 0.9

// In reports whether the calendar date of t lies within the stage.
func (d DeficitStage) In(t time.Time) bool {
	_, m, day := t.Date()
	after := func(pm time.Month, pd int) bool { return m > pm || (m == pm && day >= pd) }
	before := func(pm time.Month, pd int) bool { return m < pm || (m == pm && day <= pd) }
	if dateAfter(d.ToMonth, d.ToDay, d.FromMonth, d.FromDay) || (d.ToMonth == d.FromMonth && d.ToDay == d.FromDay) {
		return after(d.FromMonth, d.FromDay) && before(d.ToMonth, d.ToDay)
	}
	return after(d.FromMonth, d.FromDay) || before(d.ToMonth, d.ToDay) // over the new year
}

// Validate reports the first impossible value.
func (d DeficitStage) Validate() error {
	switch {
	case d.Name == "":
		return fmt.Errorf("deficit stage: name: required: %w", ErrInput)
	case d.FromMonth < 1 || d.FromMonth > 12 || d.ToMonth < 1 || d.ToMonth > 12 || d.FromDay < 1 || d.FromDay > 31 || d.ToDay < 1 || d.ToDay > 31:
		return fmt.Errorf("deficit stage %s: dates: need valid month and day, got %02d-%02d to %02d-%02d: %w", d.Name, d.FromMonth, d.FromDay, d.ToMonth, d.ToDay, ErrInput)
	case d.MAD == 0 && d.Replace == 0:
		return fmt.Errorf("deficit stage %s: set mad or replace (or both): %w", d.Name, ErrInput)
	case d.MAD != 0 && !(d.MAD >= MinP && d.MAD <= MaxMAD):
		return fmt.Errorf("deficit stage %s: mad: must be within %g-%g, got %v: %w", d.Name, MinP, MaxMAD, d.MAD, ErrInput)
	case d.Replace != 0 && !(d.Replace > 0 && d.Replace <= 1):
		return fmt.Errorf("deficit stage %s: replace: must be within (0, 1], got %v: %w", d.Name, d.Replace, ErrInput)
	}
	return nil
}

// StageAt returns the deficit stage in force on the zone's standard-time
// date of t (the first listed that holds it), or nil.
func (z *Zone) StageAt(t time.Time) *DeficitStage {
	lt := t.In(z.Loc)
	for i := range z.Stages {
		if z.Stages[i].In(lt) {
			return &z.Stages[i]
		}
	}
	return nil
}

// replaceFraction returns the share of crop ET a run may put back under
// stage s (1 when no stage or no replacement fraction applies).
func replaceFraction(s *DeficitStage) float64 {
	if s == nil || s.Replace == 0 {
		return 1
	}
	return s.Replace
}
