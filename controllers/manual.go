package controllers

import (
	"fmt"
	"math"
	"time"
)

// The kinds of steps made by water the gateway did not command.
const (
	StepManual StepKind = "manual" // water applied outside the ledger (a run started by hand)
	StepFrost  StepKind = "frost"  // water applied for frost protection
	StepReset  StepKind = "reset"  // depletion set from a hand measurement
)

// ManualKind says what a ManualWater records.
type ManualKind string

// The kinds of manual water records.
const (
	// ManualApplied is water applied outside the ledger (a run started at
	// the controller, a hose, a tank).
	ManualApplied ManualKind = "applied"
	// ManualFrost is water applied for frost protection.
	ManualFrost ManualKind = "frost_protection"
	// ManualReset sets the depletion from a hand measurement of soil water.
	ManualReset ManualKind = "depletion_reset"
)

// AmountUnit says how a ManualWater amount is given.
type AmountUnit string

// The units of a manual water amount.
const (
	// UnitNetMM is a net depth, mm: the water that reached the root zone
	// (no efficiency applied).
	UnitNetMM AmountUnit = "mm"
	// UnitMinutes is minutes run on the zone's own system: gross, the net
	// depth is minutes/60 x rate x efficiency, as a command's credit.
	UnitMinutes AmountUnit = "minutes"
	// UnitVolumeL is a metered volume, litres: gross, the net depth is
	// volume / area x efficiency, as a command's credit.
	UnitVolumeL AmountUnit = "volume_l"
)

// Limits of manual water records.
const (
	// ManualFuture is how far in the future a record's time may lie (clock
	// differences between the sender and the gateway).
	ManualFuture = 5 * time.Minute
	// ManualPast is how far back a record's time may lie: the hours the
	// balance keeps (KeepHours), so a reset can be carried forward over them.
	ManualPast = KeepHours * time.Hour
	// FrostMultiple is how many times the zone's TAW one frost protection
	// record may credit: frost protection runs for hours regardless of the
	// soil's need and the surplus drains, so it may exceed TAW where a
	// watering may not. Common practice, no source.
	FrostMultiple = 2
)

// ManualWater is water the gateway did not command, or a hand measurement of
// the depletion.
type ManualWater struct {
	Kind ManualKind
	// Amount in Unit, for ManualApplied and ManualFrost (> 0).
	Amount float64
	Unit   AmountUnit
	// Depletion is the measured root-zone depletion, mm below field
	// capacity, for ManualReset (0 to TAW).
	Depletion float64
	// At is when the water was applied or the measurement taken; zero means
	// the time of recording.
	At time.Time
}

// NetMM returns the net depth, mm, that the amount puts into the root zone
// of z (minutes and volume are gross, as for a command's credit; see
// Command.CreditFor).
func (z *Zone) NetMM(amount float64, unit AmountUnit) (float64, error) {
	if !finite(amount) || amount <= 0 {
		return 0, fmt.Errorf("manual water zone %s: %s: must be > 0, got %v; give the amount applied: %w", z.ID, unit, amount, ErrInput)
	}
	switch unit {
	case UnitNetMM:
		return amount, nil
	case UnitMinutes:
		if amount > MaxRunMinutes {
			return 0, fmt.Errorf("manual water zone %s: minutes: must be <= %d (one day), got %v; record each day's run separately: %w", z.ID, MaxRunMinutes, amount, ErrInput)
		}
		return NetMM(amount, z.System.Rate, z.System.Efficiency), nil
	case UnitVolumeL:
		return amount / z.Area * z.System.Efficiency, nil
	}
	return 0, fmt.Errorf("manual water zone %s: unit: must be mm, minutes or volume_l, got %q: %w", z.ID, unit, ErrInput)
}

// ApplyWater records w in the zone's balance at now and returns the step.
//
// Applied and frost-protection water is credited like a command's report
// (Zone.Credit): the depletion falls by the net depth and water above field
// capacity percolates (FAO-56 eq. 85, 88). A net depth above TAW
// (FrostMultiple x TAW for frost protection) is refused as implausible: it
// is most likely a unit slip (inches, gallons, hours for minutes).
//
// A reset sets the depletion measured at w.At and carries it forward to now
// over the hours the balance applied since (FAO-56 eq. 85 without
// irrigation: Dr += ETc - effective rain, kept within [0, TAW]), with the
// ETc of each hour as it was applied (its Ks is not recomputed) and the
// hour containing w.At counted for its part after w.At. An hour still open
// at w.At is applied whole when it closes, so up to one hour of ETc before
// the measurement is counted again. Water credited after w.At is not known
// to the balance's hours: the caller refuses such a reset.
//
// w.At must lie within ManualPast before now and ManualFuture after it.
func (z *Zone) ApplyWater(st *State, w ManualWater, now time.Time) (Step, error) {
	at := w.At
	if at.IsZero() {
		at = now
	}
	if at.After(now.Add(ManualFuture)) {
		return Step{}, fmt.Errorf("manual water zone %s: time: %s is in the future (now %s); give the time the water was applied: %w",
			z.ID, at.UTC().Format(time.RFC3339), now.UTC().Format(time.RFC3339), ErrInput)
	}
	if at.Before(now.Add(-ManualPast)) {
		return Step{}, fmt.Errorf("manual water zone %s: time: %s is more than %d h ago, older than the balance keeps; record it with a later time or as a depletion reset from a new measurement: %w",
			z.ID, at.UTC().Format(time.RFC3339), KeepHours, ErrInput)
	}
	lv := z.LevelsAt(st, now)
	switch w.Kind {
	case ManualApplied, ManualFrost:
		net, err := z.NetMM(w.Amount, w.Unit)
		if err != nil {
			return Step{}, err
		}
		limit, kind := lv.TAW, StepManual
		if w.Kind == ManualFrost {
			limit, kind = FrostMultiple*lv.TAW, StepFrost
		}
		if net > limit {
			return Step{}, fmt.Errorf("manual water zone %s: %s: %.1f mm net is more than %.1f mm (%s); check the unit (mm, not inches; minutes, not hours; litres, not gallons): %w",
				z.ID, w.Unit, net, limit, limitText(w.Kind, lv.TAW), ErrInput)
		}
		s, err := z.Credit(st, "", net, now)
		if err != nil {
			return Step{}, err
		}
		s.Kind = kind
		return s, nil
	case ManualReset:
		if !finite(w.Depletion) || w.Depletion < 0 || w.Depletion > lv.TAW {
			return Step{}, fmt.Errorf("manual water zone %s: depletion_mm: must be within 0-%.1f mm (TAW, 0 = field capacity), got %v; give mm below field capacity, not a water content: %w",
				z.ID, lv.TAW, w.Depletion, ErrInput)
		}
		return z.reset(st, w.Depletion, at, now, lv), nil
	}
	return Step{}, fmt.Errorf("manual water zone %s: kind: must be applied, frost_protection or depletion_reset, got %q: %w", z.ID, w.Kind, ErrInput)
}

func limitText(k ManualKind, taw float64) string {
	if k == ManualFrost {
		return fmt.Sprintf("%d x TAW %.1f mm", FrostMultiple, taw)
	}
	return fmt.Sprintf("TAW %.1f mm", taw)
}

// reset sets the depletion measured at at and carries it forward to now.
func (z *Zone) reset(st *State, measured float64, at, now time.Time, lv Levels) Step {
	s := Step{Zone: z.ID, Kind: StepReset, Start: now, End: now,
		TAW: lv.TAW, RAW: lv.RAW, P: lv.P, Ks: Ks(st.Depletion, lv.TAW, lv.P), Kc: z.Crop.KcOn(now.In(z.Loc))}
	d := measured
	for _, h := range st.Hours {
		end := h.Start.Add(time.Hour)
		if !end.After(at) {
			continue
		}
		frac := 1.0
		if h.Start.Before(at) {
			frac = float64(end.Sub(at)) / float64(time.Hour)
		}
		d = math.Min(math.Max(d+frac*(h.ETc-h.EffRain), 0), lv.TAW) // FAO-56 eq. 85
	}
	st.Depletion = d
	s.Depletion = d
	return s
}
