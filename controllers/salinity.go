package controllers

import "fmt"

// Salinity is the salt in a zone's irrigation water and the crop's
// tolerance, from which the leaching requirement follows.
type Salinity struct {
	// ECw is the electrical conductivity of the irrigation water, dS/m.
	ECw float64
	// ECe is the crop's threshold soil salinity, the electrical
	// conductivity of the saturated-paste extract at which yield starts to
	// fall, dS/m (FAO-29, Ayers and Westcot 1985, Table 4 lists it per crop).
	ECe float64
	// FreshUpTo is the ECw, dS/m, at or below which the water counts as
	// fresh and no leaching is added.
	FreshUpTo float64
}

// DefaultFreshUpTo is the ECw at or below which water is fresh: FAO-29
// (Ayers and Westcot 1985) Table 1 puts no restriction on use below
// 0.7 dS/m (from memory).
const DefaultFreshUpTo = 0.7

// MaxEC bounds an electrical conductivity, dS/m (sea water is about 50;
// common practice, no source).
const MaxEC = 50.0

// MaxLeaching bounds the leaching requirement: water so salty that more
// than half of each run must pass the root zone is refused (common
// practice, no source).
const MaxLeaching = 0.5

// LeachingRequirement returns LR = ECw / (5 ECe - ECw), the fraction of the
// applied water that must pass below the root zone to hold the soil at the
// crop's threshold ECe (FAO-29, Ayers and Westcot 1985, section 2.4, the
// leaching requirement for surface and sprinkler irrigation; from memory,
// equation number not checked). Water at or below FreshUpTo needs none: 0.
func (s Salinity) LeachingRequirement() float64 {
	if s.ECw <= 0 || s.ECw <= s.FreshUpTo || s.ECe <= 0 {
		return 0
	}
	return s.ECw / (5*s.ECe - s.ECw)
}

// Validate reports the first impossible value.
func (s Salinity) Validate() error {
	switch {
	case !(s.ECw >= 0 && s.ECw <= MaxEC):
		return fmt.Errorf("salinity water ec: must be within 0-%g dS/m, got %v: %w", MaxEC, s.ECw, ErrInput)
	case !(s.ECe >= 0 && s.ECe <= MaxEC) || (s.ECw > 0 && s.ECe == 0):
		return fmt.Errorf("salinity threshold ec: must be within (0, %g] dS/m when the water ec is set, got %v: %w", MaxEC, s.ECe, ErrInput)
	case !(s.FreshUpTo >= 0 && s.FreshUpTo <= MaxEC):
		return fmt.Errorf("salinity fresh up to: must be within 0-%g dS/m, got %v: %w", MaxEC, s.FreshUpTo, ErrInput)
	}
	if lr := s.LeachingRequirement(); lr > MaxLeaching || lr < 0 {
		return fmt.Errorf("salinity: water ec %v dS/m against threshold %v dS/m needs a leaching requirement of %.2f, above %g: the water is too salty for this crop: %w",
			s.ECw, s.ECe, lr, MaxLeaching, ErrInput)
	}
	return nil
}

// GrossForLeaching returns the water to apply so that net mm stay in the
// root zone while the leaching fraction lr passes below it: AW = net /
// (1 - LR) (FAO-29, Ayers and Westcot 1985, section 2.4; from memory).
func GrossForLeaching(net, lr float64) float64 {
	if lr <= 0 || lr >= 1 {
		return net
	}
	return net / (1 - lr)
}
