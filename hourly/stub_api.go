package hourly

// TEMPORARY signatures so that other packages compile while the engine is
// written; the engine's author replaces this file.

import "time"

// AggregateOptions controls AggregateHour.
type AggregateOptions struct {
	WindHeight  float64 // m above ground of the wind sensor; FAO-56 eq. 47 adjusts to 2 m
	MinCoverage float64 // fraction 0-1 of coverage slots a required quantity must fill
}

// Aggregate is one hour built from samples.
type Aggregate struct {
	Hour    Hour
	Stats   map[Quantity]Stats
	Rain    float64
	Missing []Quantity // required quantities below MinCoverage; empty when complete
}

// Compute returns the reference ET of one hour with every intermediate.
func Compute(st Station, ref Reference, h Hour, carry Carry) (Result, Carry, error) {
	return Result{}, carry, ErrInput
}

// AggregateHour builds the hour starting at start from its samples.
func AggregateHour(start time.Time, samples []Sample, opt AggregateOptions) (Aggregate, error) {
	return Aggregate{}, ErrInput
}
