package controllers

import (
	"fmt"
	"math"
)

// SystemKind is the type of irrigation system.
type SystemKind string

// The system types.
const (
	Sprinkler      SystemKind = "sprinkler"
	Drip           SystemKind = "drip"
	MicroSprinkler SystemKind = "micro_sprinkler"
)

// System is a zone's irrigation system and its hard limits.
type System struct {
	Kind SystemKind
	// Rate is the gross application rate, mm/h (given, or from SprinklerRate
	// or DripRate).
	Rate float64
	// Efficiency is the application efficiency (0-1]: the fraction of the
	// applied water that stays in the root zone.
	Efficiency float64
	// Flow is the zone's flow, L/min, for the source's flow limit; 0 means
	// Rate x Area / 60.
	Flow float64

	MinMinutes   int // shortest command; shorter needs are deferred
	MaxMinutes   int // hard cap on one run (all cycles of one event together)
	MaxPerDay    int // hard cap on the minutes started within one standard-time day
	CycleMinutes int // longest continuous run; 0: no cycle-and-soak
	SoakMinutes  int // pause between cycles
}

// Validate reports the first impossible value.
func (s System) Validate() error {
	switch s.Kind {
	case Sprinkler, Drip, MicroSprinkler:
	default:
		return fmt.Errorf("system type: unknown %q: %w", s.Kind, ErrInput)
	}
	switch {
	case !(s.Rate > 0 && s.Rate <= MaxRate):
		return fmt.Errorf("system rate: must be within (0, %g] mm/h, got %v: %w", MaxRate, s.Rate, ErrInput)
	case !(s.Efficiency > 0 && s.Efficiency <= MaxEfficiency):
		return fmt.Errorf("system efficiency: must be within (0, %g], got %v: %w", MaxEfficiency, s.Efficiency, ErrInput)
	case !(s.Flow >= 0) || math.IsInf(s.Flow, 0):
		return fmt.Errorf("system flow: must be >= 0 L/min, got %v: %w", s.Flow, ErrInput)
	case s.MinMinutes < MinRunMinutes:
		return fmt.Errorf("system min minutes: must be >= %d, got %d: %w", MinRunMinutes, s.MinMinutes, ErrInput)
	case s.MaxMinutes < s.MinMinutes || s.MaxMinutes > MaxRunMinutes:
		return fmt.Errorf("system max minutes: must be within min minutes (%d) and %d, got %d: %w", s.MinMinutes, MaxRunMinutes, s.MaxMinutes, ErrInput)
	case s.MaxPerDay < s.MinMinutes || s.MaxPerDay > MaxRunMinutes:
		return fmt.Errorf("system max minutes per day: must be within min minutes (%d) and %d, got %d: %w", s.MinMinutes, MaxRunMinutes, s.MaxPerDay, ErrInput)
	case s.CycleMinutes < 0 || s.SoakMinutes < 0:
		return fmt.Errorf("system cycle/soak minutes: must be >= 0, got %d/%d: %w", s.CycleMinutes, s.SoakMinutes, ErrInput)
	case s.CycleMinutes > 0 && s.MinMinutes > s.CycleMinutes/2:
		// Splitting any need longer than one cycle into equal parts must not
		// produce parts below the minimum.
		return fmt.Errorf("system min minutes: must be <= half of cycle minutes (%d) so cycles never fall below it, got %d: %w", s.CycleMinutes, s.MinMinutes, ErrInput)
	case s.CycleMinutes > 0 && s.SoakMinutes < 1:
		return fmt.Errorf("system soak minutes: must be >= 1 with cycle minutes set, got %d: %w", s.SoakMinutes, ErrInput)
	}
	return nil
}

// SprinklerRate returns the application rate of a sprinkler grid, mm/h:
// rate = 60 q / (Sl Sm), q the nozzle flow in L/min and Sl, Sm the spacing
// along and between laterals in m (a litre on a square metre is a millimetre;
// 60 minutes to the hour). Common practice, no source.
func SprinklerRate(nozzleLMin, spacingL, spacingM float64) (float64, error) {
	if !(nozzleLMin > 0) || !(spacingL > 0) || !(spacingM > 0) || math.IsInf(nozzleLMin, 0) {
		return 0, fmt.Errorf("sprinkler rate: need nozzle flow and spacings > 0, got %v L/min, %v m x %v m: %w", nozzleLMin, spacingL, spacingM, ErrInput)
	}
	return 60 * nozzleLMin / (spacingL * spacingM), nil
}

// DripRate returns the application rate of drip emitters over the area each
// plant occupies, mm/h: rate = q e / A, q the emitter flow in L/h, e emitters
// per plant and A the area per plant in m2 (row x plant spacing). Common
// practice, no source.
func DripRate(emitterLH float64, perPlant int, plantArea float64) (float64, error) {
	if !(emitterLH > 0) || perPlant < 1 || !(plantArea > 0) || math.IsInf(emitterLH, 0) {
		return 0, fmt.Errorf("drip rate: need emitter flow > 0, emitters per plant >= 1 and plant area > 0, got %v L/h, %d, %v m2: %w", emitterLH, perPlant, plantArea, ErrInput)
	}
	return emitterLH * float64(perPlant) / plantArea, nil
}

// GrossMinutes returns the whole minutes needed to put net mm into the root
// zone: gross depth = net / efficiency, time = gross / rate, rounded UP to a
// whole minute (valve controllers take whole minutes; rounding up adds at
// most one minute of water, rounding down would leave the trigger reached).
// A tiny tolerance keeps 30.0000000001 from becoming 31.
func GrossMinutes(net, efficiency, rate float64) int {
	return wholeMinutes(net, efficiency, rate, func(m float64) float64 { return math.Ceil(m - 1e-9) })
}

// wholeMinutes converts a net depth to minutes of the system, rounded by
// round and limited to one day.
func wholeMinutes(net, efficiency, rate float64, round func(float64) float64) int {
	if !(net > 0) || !(efficiency > 0) || !(rate > 0) {
		return 0
	}
	m := net / efficiency / rate * 60
	if m > MaxRunMinutes {
		return MaxRunMinutes
	}
	return int(round(m))
}

// NetMM returns the net depth reaching the root zone when the system runs
// for minutes: minutes/60 x rate x efficiency.
func NetMM(minutes, rate, efficiency float64) float64 {
	return minutes / 60 * rate * efficiency
}

// SplitCycles splits total minutes into the fewest equal cycles of at most
// cycle minutes each (earlier cycles take the odd minutes), e.g. 50 with a
// 20-minute cycle gives 17, 17, 16. A cycle of 0 means no split.
func SplitCycles(total, cycle int) []int {
	if total <= 0 {
		return nil
	}
	if cycle <= 0 || total <= cycle {
		return []int{total}
	}
	n := (total + cycle - 1) / cycle
	out := make([]int, n)
	for i := range out {
		out[i] = total / n
		if i < total%n {
			out[i]++
		}
	}
	return out
}

// floorMinutes returns the whole minutes that put at most net mm into the
// root zone (GrossMinutes rounded down instead of up): a regulated deficit
// must not exceed its share.
func floorMinutes(net, efficiency, rate float64) int {
	return wholeMinutes(net, efficiency, rate, func(m float64) float64 { return math.Floor(m + 1e-9) })
}
