package controllers

import (
	"fmt"
	"time"
)

// Soil describes a zone's root zone.
type Soil struct {
	// FieldCapacity and WiltingPoint are volumetric water contents, m3/m3
	// (FAO-56 Table 19 lists typical ranges). Used when AvailableWater is 0.
	FieldCapacity, WiltingPoint float64
	// AvailableWater is the total available water per metre of root depth,
	// mm/m; when > 0 it replaces 1000 (θFC - θWP).
	AvailableWater float64
	// RootMin and RootMax are the effective root depths Zr, m. When the crop
	// has a season and RootMin < RootMax, the depth grows linearly from
	// RootMin on the first season day to RootMax at the start of mid-season
	// and stays there; outside the season it is RootMin. Otherwise RootMax.
	RootMin, RootMax float64
	// P is the fraction of TAW that can be depleted before stress (FAO-56
	// Table 22).
	P float64
	// AdjustP applies the FAO-56 Table 22 footnote: p = p_table + 0.04 (5 - ETc),
	// ETc in mm/day, limited to 0.1-0.8.
	AdjustP bool
	// TriggerMM, when > 0, is the depletion at which irrigation is planned,
	// replacing RAW as the trigger (Ks still uses RAW).
	TriggerMM float64
	// RefillFraction is the depletion to leave after irrigation as a fraction
	// of RAW: 0 refills to field capacity, 0.2 leaves 20 % of RAW as room for
	// rain.
	RefillFraction float64
	// WettedFraction is the fraction of the soil wetted by the emitters
	// (drip, micro-sprinklers), 0-1; 0 means 1 (all of it). Roots draw on
	// the wetted volume only, so TAW, RAW and the depth a run refills are
	// those of the wetted fraction, expressed over the zone's whole area
	// (FAO-56 Table 20 gives fw; the scaling of TAW by fw is common
	// practice for micro-irrigation, no source).
	WettedFraction float64
}

// Validate reports the first impossible value.
func (s Soil) Validate() error {
	if !(s.AvailableWater >= 0 && s.AvailableWater <= MaxAvailableWater) {
		return fmt.Errorf("available water: must be within 0-%g mm/m, got %v: %w", MaxAvailableWater, s.AvailableWater, ErrInput)
	}
	if s.AvailableWater == 0 {
		if !(s.FieldCapacity > 0 && s.FieldCapacity <= MaxFieldCapacity) || !(s.WiltingPoint >= 0 && s.WiltingPoint < s.FieldCapacity) {
			return fmt.Errorf("field capacity/wilting point: need 0 <= θWP < θFC <= %g, got %v/%v: %w",
				MaxFieldCapacity, s.FieldCapacity, s.WiltingPoint, ErrInput)
		}
	}
	if !(s.RootMax > 0 && s.RootMax <= MaxRootDepth) || !(s.RootMin >= 0 && s.RootMin <= s.RootMax) {
		return fmt.Errorf("root depth: need 0 <= min <= max, 0 < max <= %g m, got %v/%v: %w", MaxRootDepth, s.RootMin, s.RootMax, ErrInput)
	}
	if !(s.P >= MinP && s.P <= MaxP) {
		return fmt.Errorf("p: must be within %g-%g, got %v: %w", MinP, MaxP, s.P, ErrInput)
	}
	if !(s.WettedFraction >= 0 && s.WettedFraction <= 1) {
		return fmt.Errorf("wetted fraction: must be within (0, 1], got %v: %w", s.WettedFraction, ErrInput)
	}
	if s.TriggerMM < 0 || !(s.RefillFraction >= 0 && s.RefillFraction < 1) {
		return fmt.Errorf("trigger/refill: need trigger >= 0 and 0 <= refill < 1, got %v/%v: %w", s.TriggerMM, s.RefillFraction, ErrInput)
	}
	return nil
}

// perMetre returns the available water per metre of root depth, mm/m.
func (s Soil) perMetre() float64 {
	if s.AvailableWater > 0 {
		return s.AvailableWater
	}
	return 1000 * (s.FieldCapacity - s.WiltingPoint) // FAO-56 eq. 82 without Zr
}

// RootDepth returns Zr on the date of t for a crop with an optional season.
func (s Soil) RootDepth(season *Season, t time.Time) float64 {
	if season == nil || s.RootMin <= 0 || s.RootMin >= s.RootMax {
		return s.RootMax
	}
	i, in := season.Day(t)
	if !in {
		return s.RootMin
	}
	grow := season.Initial + season.Development
	if i >= grow {
		return s.RootMax
	}
	return s.RootMin + float64(i-1)/float64(grow-1)*(s.RootMax-s.RootMin)
}

// TAW returns the total available water of a root zone of depth zr m, mm:
// TAW = 1000 (θFC - θWP) Zr (FAO-56 eq. 82), times the wetted fraction
// when only part of the soil is wetted.
func (s Soil) TAW(zr float64) float64 { return s.perMetre() * zr * s.Wetted() }

// Wetted returns the wetted fraction of the soil (1 when not set).
func (s Soil) Wetted() float64 {
	if s.WettedFraction == 0 {
		return 1
	}
	return s.WettedFraction
}

// PFor returns the depletion fraction p for a crop ET of etcDay mm/day: the
// tabled p, or with AdjustP p = p_table + 0.04 (5 - ETc) limited to 0.1-0.8
// (FAO-56 Table 22 footnote). A negative etcDay means unknown (no adjustment).
func (s Soil) PFor(etcDay float64) float64 {
	if !s.AdjustP || etcDay < 0 {
		return s.P
	}
	return clamp(s.P+0.04*(5-etcDay), MinP, MaxP)
}

// RAW returns the readily available water, mm: RAW = p TAW (FAO-56 eq. 83).
func RAW(p, taw float64) float64 { return p * taw }

// Ks returns the water stress coefficient for root-zone depletion dr (FAO-56
// eq. 84): Ks = (TAW - Dr) / ((1 - p) TAW) when Dr > RAW, else 1; never below 0.
func Ks(dr, taw, p float64) float64 {
	raw := RAW(p, taw)
	if dr <= raw || taw <= 0 {
		return 1
	}
	ks := (taw - dr) / ((1 - p) * taw) // FAO-56 eq. 84
	return clamp(ks, 0, 1)
}
