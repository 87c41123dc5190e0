package hourly

import (
	"cmp"
	"fmt"
	"math"
	"math/bits"
	"slices"
	"time"
)

// CoverageSlots is the number of equal slots (five minutes each) an hour is
// divided into to measure how well a quantity covers it.
const CoverageSlots = 12

// AggregateOptions controls AggregateHour.
type AggregateOptions struct {
	// WindHeight is the height of the wind sensor above ground, m; FAO-56
	// eq. 47 adjusts its speed to 2 m. Zero means 2 m.
	WindHeight float64
	// MinCoverage is the fraction (0-1) of the hour's CoverageSlots that a
	// required quantity must fill. Zero means one sample is enough.
	MinCoverage float64
}

// Aggregate is one hour built from samples.
type Aggregate struct {
	// Hour holds the aggregated inputs for Compute. Quantities listed in
	// Missing are left zero in it.
	Hour Hour
	// Stats summarises each quantity that had at least one usable sample.
	Stats map[Quantity]Stats
	// Rain is the sum of rain increments over the hour, mm.
	Rain float64
	// Missing lists the required quantities (air temperature, humidity,
	// wind, solar) below MinCoverage; empty when the hour is complete.
	Missing []Quantity
	// Humidity is the quantity that supplied Hour.Ea (vapour_pressure,
	// dew_point or rel_humidity), empty when none did.
	Humidity Quantity
	// Duplicates counts samples dropped because an earlier sample had the
	// same sensor, quantity and time.
	Duplicates int
	// Rejected holds one error (wrapping ErrInput) per sample that was not
	// used: outside the hour, unknown quantity, non-finite or impossible
	// value. The other samples are aggregated without it.
	Rejected []error
}

// Complete reports whether every required quantity met the coverage threshold.
func (a Aggregate) Complete() bool { return len(a.Missing) == 0 }

// sampleRange gives the plausible canonical range of each quantity's samples
// (common practice, no source). RH gets RHTolerance and is then clamped.
func sampleRange(q Quantity) (lo, hi float64, ok bool) {
	switch q {
	case AirTemp, DewPoint:
		return MinAirTemp, MaxAirTemp, true
	case RelHumidity:
		return -RHTolerance, 100 + RHTolerance, true
	case VapourPressure:
		return 0, 26, true // e°(65 degC) is about 25 kPa (FAO-56 eq. 11)
	case Wind:
		return 0, MaxWind, true
	case Solar:
		return -2 * SolarTolerance * 5, MaxSolar, true // instantaneous night offsets reach tens of W/m2
	case Rain:
		return 0, 500, true
	case NetRad, SoilHeat:
		return -MaxFlux, MaxFlux, true
	}
	return 0, 0, false
}

// AggregateHour builds the hour [start, start+1h) from the samples of one
// station (canonical units, any order). Samples with the same sensor,
// quantity and time are counted once (sensor ids may carry several
// quantities, so the quantity is part of the key). Rules:
//
//   - air temperature: mean of the samples;
//   - ea: mean of per-sample ea, taken from vapour_pressure samples if they
//     cover the hour, else dew_point samples (FAO-56 eq. 14), else
//     rel_humidity samples each paired with the nearest-in-time air
//     temperature sample (FAO-56 eq. 54); never from mean RH and mean T;
//   - wind: mean adjusted to 2 m by FAO-56 eq. 47 with opt.WindHeight;
//   - solar: mean W m-2 with negative values counted as zero, x 0.0036 to
//     MJ m-2 h-1 (Stats keep the raw values);
//   - rain: sum of increments;
//   - net radiation and soil heat flux: means in MJ m-2 h-1, flagged as
//     measured in Hour.
//
// Coverage of a quantity is the fraction of the 12 five-minute slots holding
// a sample. A required quantity (air temperature, one humidity quantity,
// wind, solar) without samples or below opt.MinCoverage is listed in
// Missing. Bad samples are listed in Rejected and skipped. The error is
// non-nil only for bad options.
func AggregateHour(start time.Time, samples []Sample, opt AggregateOptions) (Aggregate, error) {
	var a Aggregate
	if !finite(opt.MinCoverage) || opt.MinCoverage < 0 || opt.MinCoverage > 1 {
		return a, fmt.Errorf("aggregate hour: min coverage: %v outside 0..1: %w", opt.MinCoverage, ErrConfig)
	}
	height := opt.WindHeight
	if height == 0 {
		height = 2
	}
	windFactor, err := WindFactor(height)
	if err != nil {
		return a, fmt.Errorf("aggregate hour: %w (%w)", err, ErrConfig)
	}
	a.Hour = Hour{Start: start, Length: time.Hour}

	// Pointer-free records sort without write barriers; src keeps the
	// sensor id reachable and makes the order total (first input wins among
	// duplicates).
	buf := make([]binned, 0, len(samples))
	for i, s := range samples {
		qi, known := quantityIndex(s.Quantity)
		lo, hi, _ := sampleRange(s.Quantity)
		off := s.Time.Sub(start)
		switch {
		case !known:
			a.Rejected = append(a.Rejected, fmt.Errorf("sample %s from %q at %s: unknown quantity: %w", s.Quantity, s.Sensor, s.Time.Format(time.RFC3339), ErrInput))
			continue
		case s.Time.Before(start) || off >= time.Hour:
			a.Rejected = append(a.Rejected, fmt.Errorf("sample %s from %q: time %s outside hour %s: %w", s.Quantity, s.Sensor, s.Time.Format(time.RFC3339), start.Format(time.RFC3339), ErrInput))
			continue
		case !finite(s.Value) || s.Value < lo || s.Value > hi:
			a.Rejected = append(a.Rejected, fmt.Errorf("sample %s from %q at %s: %v %s outside %g..%g: %w", s.Quantity, s.Sensor, s.Time.Format(time.RFC3339), s.Value, CanonicalUnit(s.Quantity), lo, hi, ErrInput))
			continue
		}
		v := s.Value
		if s.Quantity == RelHumidity {
			v = min(max(v, 0), 100)
		}
		buf = append(buf, binned{q: qi, src: int32(i), off: off, v: v})
	}
	slices.SortFunc(buf, func(x, y binned) int {
		if x.q != y.q {
			return cmp.Compare(x.q, y.q)
		}
		if c := cmp.Compare(samples[x.src].Sensor, samples[y.src].Sensor); c != 0 {
			return c
		}
		if x.off != y.off {
			return cmp.Compare(x.off, y.off)
		}
		return cmp.Compare(x.src, y.src)
	})
	n := 0
	for i, b := range buf {
		if i > 0 {
			p := buf[n-1]
			if p.q == b.q && p.off == b.off && samples[p.src].Sensor == samples[b.src].Sensor {
				a.Duplicates++
				continue
			}
		}
		buf[n] = b
		n++
	}
	buf = buf[:n]

	var groups [len(quantityOrder)][]binned
	for i := 0; i < len(buf); {
		j := i + 1
		for j < len(buf) && buf[j].q == buf[i].q {
			j++
		}
		groups[buf[i].q] = buf[i:j]
		i = j
	}
	group := func(q Quantity) []binned {
		qi, _ := quantityIndex(q)
		return groups[qi]
	}
	a.Stats = make(map[Quantity]Stats, 8)
	for qi, g := range groups {
		if len(g) > 0 {
			a.Stats[quantityOrder[qi]] = summarise(g)
		}
	}
	covered := func(q Quantity) bool {
		st, ok := a.Stats[q]
		return ok && st.Count > 0 && st.Coverage >= opt.MinCoverage
	}

	if covered(AirTemp) {
		a.Hour.AirTemp = a.Stats[AirTemp].Mean
	} else {
		a.Missing = append(a.Missing, AirTemp)
	}

	switch {
	case covered(VapourPressure):
		a.Humidity = VapourPressure
		a.Hour.Ea = a.Stats[VapourPressure].Mean
	case covered(DewPoint):
		a.Humidity = DewPoint
		var sum float64
		for _, b := range group(DewPoint) {
			sum += SatVapourPressure(b.v) // FAO-56 eq. 14
		}
		a.Hour.Ea = sum / float64(len(group(DewPoint)))
	case covered(RelHumidity) && len(group(AirTemp)) > 0:
		a.Humidity = RelHumidity
		a.Hour.Ea = eaFromRH(group(RelHumidity), group(AirTemp))
	default:
		missing := RelHumidity
		for _, q := range []Quantity{VapourPressure, DewPoint} {
			if _, ok := a.Stats[q]; ok {
				missing = q
				break
			}
		}
		a.Missing = append(a.Missing, missing)
	}

	if covered(Wind) {
		a.Hour.Wind2 = a.Stats[Wind].Mean * windFactor // FAO-56 eq. 47
	} else {
		a.Missing = append(a.Missing, Wind)
	}

	if covered(Solar) {
		var sum float64
		for _, b := range group(Solar) {
			sum += max(b.v, 0)
		}
		a.Hour.Solar = sum / float64(len(group(Solar))) * WattsToMJPerHour
	} else {
		a.Missing = append(a.Missing, Solar)
	}

	for _, b := range group(Rain) {
		a.Rain += b.v
	}
	if st, ok := a.Stats[NetRad]; ok {
		a.Hour.NetRad = st.Mean * WattsToMJPerHour
		a.Hour.HasNetRad = true
	}
	if st, ok := a.Stats[SoilHeat]; ok {
		a.Hour.SoilHeat = st.Mean * WattsToMJPerHour
		a.Hour.HasSoilHeat = true
	}
	return a, nil
}

// binned is one accepted sample inside the hour.
type binned struct {
	q   uint8         // index into quantityOrder
	src int32         // index of the sample in the caller's slice
	off time.Duration // time since the start of the hour
	v   float64       // value, canonical unit
}

// quantityOrder fixes the index of each Quantity in binned.q.
var quantityOrder = [...]Quantity{AirTemp, RelHumidity, DewPoint, VapourPressure, Wind, Solar, Rain, NetRad, SoilHeat}

func quantityIndex(q Quantity) (uint8, bool) {
	for i, x := range quantityOrder {
		if x == q {
			return uint8(i), true
		}
	}
	return 0, false
}

// summarise computes the Stats of one quantity's samples.
func summarise(g []binned) Stats {
	st := Stats{Count: len(g), Min: math.Inf(1), Max: math.Inf(-1)}
	var slots uint32
	var sum float64
	for _, b := range g {
		sum += b.v
		st.Min = min(st.Min, b.v)
		st.Max = max(st.Max, b.v)
		slot := int(b.off / (time.Hour / CoverageSlots))
		slots |= 1 << uint(min(max(slot, 0), CoverageSlots-1))
	}
	st.Mean = sum / float64(len(g))
	st.Coverage = float64(bits.OnesCount32(slots)) / CoverageSlots
	return st
}

// eaFromRH pairs each RH sample with the nearest-in-time air temperature
// sample and returns the mean of the per-sample ea (FAO-56 eq. 54).
func eaFromRH(rh, temps []binned) float64 {
	ts := slices.Clone(temps)
	slices.SortStableFunc(ts, func(x, y binned) int { return cmp.Compare(x.off, y.off) })
	var sum float64
	for _, b := range rh {
		i, _ := slices.BinarySearchFunc(ts, b.off, func(e binned, off time.Duration) int { return cmp.Compare(e.off, off) })
		best := min(i, len(ts)-1)
		if i > 0 && (i == len(ts) || b.off-ts[i-1].off <= ts[i].off-b.off) {
			best = i - 1
		}
		sum += SatVapourPressure(ts[best].v) * b.v / 100 // FAO-56 eq. 54
	}
	return sum / float64(len(rh))
}
