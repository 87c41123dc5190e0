package ingest

import (
	"errors"
	"fmt"
	"math"

	"etpulse/gateway/config"
	"etpulse/hourly"
)

// Range is the accepted interval of a quantity in its canonical unit.
type Range struct{ Min, Max float64 }

// PhysicalRanges are the values accepted per quantity, canonical units. They
// reject what no working sensor at a farm weather station reports, not
// merely unusual weather (common practice, no source; the extremes recorded
// at the surface, about -89 and +57 degC and gusts near 113 m/s, are from
// memory and lie outside or near these bounds on purpose: a mast-height
// anemometer averaging seconds to minutes does not report 113 m/s).
var PhysicalRanges = map[hourly.Quantity]Range{
	hourly.AirTemp:        {-60, 60},   // degC
	hourly.DewPoint:       {-80, 60},   // degC
	hourly.RelHumidity:    {0, 103},    // %, 3 % over-read tolerated; the engine clamps to 100
	hourly.VapourPressure: {0, 20},     // kPa; saturation at 60 degC is about 19.9 kPa (FAO-56 eq. 11, from memory)
	hourly.Wind:           {0, 75},     // m/s
	hourly.Solar:          {-20, 1600}, // W m-2; small negative night offsets of thermopile pyranometers pass
	hourly.Rain:           {0, 500},    // mm per message (increment)
	hourly.NetRad:         {-300, 1200},
	hourly.SoilHeat:       {-300, 500},
	hourly.SoilWater:      {0, 100},  // % by volume
	hourly.SoilTension:    {0, 2000}, // kPa suction; past the 1500 kPa wilting point no probe reads
}

// Limits of raw rain values (common practice, no source).
const (
	maxTipsPerMessage = 10000
)

// errOutOfRange is wrapped by range errors.
var errOutOfRange = errors.New("out of range")

// normalise turns a raw value in unit into a reading for ch.
func normalise(ch config.Channel, unit string, v float64) (Reading, Reason, error) {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return Reading{}, ReasonUnparseable, fmt.Errorf("%s: %v is not a finite number", ch.Quantity, v)
	}
	rd := Reading{Sample: hourly.Sample{Quantity: ch.Quantity}}
	if ch.Quantity == hourly.Rain {
		return normaliseRain(rd, ch, unit, v)
	}
	c, err := hourly.ToCanonical(ch.Quantity, unit, v)
	if err != nil {
		return Reading{}, ReasonUnitMismatch, fmt.Errorf("%s: unit %q is not one of %v", ch.Quantity, unit, hourly.UnitsFor(ch.Quantity))
	}
	if err := checkRange(ch.Quantity, c, unit, v); err != nil {
		return Reading{}, ReasonOutOfRange, err
	}
	rd.Sample.Value = c
	return rd, "", nil
}

func normaliseRain(rd Reading, ch config.Channel, unit string, v float64) (Reading, Reason, error) {
	toMM := func(x float64) (float64, error) {
		if ch.MMPerTip > 0 {
			return x * ch.MMPerTip, nil
		}
		return hourly.ToCanonical(hourly.Rain, unit, x)
	}
	switch ch.RainMode {
	case config.RainTips:
		if v < 0 || v > maxTipsPerMessage {
			return Reading{}, ReasonOutOfRange, fmt.Errorf("rain: %g tips outside 0..%d: %w", v, maxTipsPerMessage, errOutOfRange)
		}
		mm := v * ch.MMPerTip
		if err := checkRange(hourly.Rain, mm, "tips", v); err != nil {
			return Reading{}, ReasonOutOfRange, err
		}
		rd.Sample.Value = mm
		return rd, "", nil
	case config.RainCounter:
		if v < 0 {
			return Reading{}, ReasonOutOfRange, fmt.Errorf("rain counter: %g is negative: %w", v, errOutOfRange)
		}
		if ch.RolloverAt > 0 && v >= ch.RolloverAt {
			return Reading{}, ReasonOutOfRange, fmt.Errorf("rain counter: %g is not below rollover_at %g: %w", v, ch.RolloverAt, errOutOfRange)
		}
		mm, err := toMM(v)
		if err != nil {
			return Reading{}, ReasonUnitMismatch, fmt.Errorf("rain: unit %q is not one of %v", unit, hourly.UnitsFor(hourly.Rain))
		}
		roll := 0.0
		if ch.RolloverAt > 0 {
			roll, _ = toMM(ch.RolloverAt) // same unit as v, which converted
		}
		rd.Sample.Value, rd.Counter, rd.Rollover = mm, true, roll
		return rd, "", nil
	default: // increment
		mm, err := hourly.ToCanonical(hourly.Rain, unit, v)
		if err != nil {
			return Reading{}, ReasonUnitMismatch, fmt.Errorf("rain: unit %q is not one of %v", unit, hourly.UnitsFor(hourly.Rain))
		}
		if err := checkRange(hourly.Rain, mm, unit, v); err != nil {
			return Reading{}, ReasonOutOfRange, err
		}
		rd.Sample.Value = mm
		return rd, "", nil
	}
}

func checkRange(q hourly.Quantity, canonical float64, unit string, raw float64) error {
	r, ok := PhysicalRanges[q]
	if !ok || (canonical >= r.Min && canonical <= r.Max) {
		return nil
	}
	cu := hourly.CanonicalUnit(q)
	if unit != cu {
		return fmt.Errorf("%s: %g %s (%.4g %s) outside %g..%g %s: %w", q, raw, unit, canonical, cu, r.Min, r.Max, cu, errOutOfRange)
	}
	return fmt.Errorf("%s: %g %s outside %g..%g %s: %w", q, raw, unit, r.Min, r.Max, cu, errOutOfRange)
}

// ErrCounter is wrapped by CounterIncrement errors.
var ErrCounter = errors.New("rain counter")

// CounterIncrement returns the rain fallen between two readings of a
// cumulative counter, prev then cur, both in mm. rollover is the counter value
// at which it wraps to zero (0: it never wraps).
//
// When cur < prev and rollover is set, the counter wrapped once:
// increment = rollover - prev + cur. When cur < prev and no rollover is set,
// the counter was reset (logger restart, battery change): the increment is cur,
// the rain counted since the reset. Negative or non-finite inputs, or a
// reading at or above rollover, are errors wrapping ErrCounter.
func CounterIncrement(prev, cur, rollover float64) (float64, error) {
	for _, x := range []struct {
		name string
		v    float64
	}{{"previous", prev}, {"current", cur}, {"rollover", rollover}} {
		if math.IsNaN(x.v) || math.IsInf(x.v, 0) || x.v < 0 {
			return 0, fmt.Errorf("counter increment: %s value %v must be a finite number >= 0: %w", x.name, x.v, ErrCounter)
		}
	}
	if rollover > 0 && (prev >= rollover || cur >= rollover) {
		return 0, fmt.Errorf("counter increment: values %v, %v must be below rollover %v: %w", prev, cur, rollover, ErrCounter)
	}
	switch {
	case cur >= prev:
		return cur - prev, nil
	case rollover > 0:
		return rollover - prev + cur, nil
	default:
		return cur, nil
	}
}
