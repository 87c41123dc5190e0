package controllers

import (
	"math"
	"testing"

	"github.com/stretchr/testify/assert"
)

// TestZoneLimits: Zone.Validate accepts each declared bound exactly and
// refuses the next value outside it, so the limits the configuration
// translates to its field paths are the ones the balance enforces.
func TestZoneLimits(t *testing.T) {
	below := func(v float64) float64 { return math.Nextafter(v, math.Inf(-1)) }
	above := func(v float64) float64 { return math.Nextafter(v, math.Inf(1)) }
	type check struct {
		name string
		set  func(*Zone)
	}
	f := func(name string, set func(*Zone, float64), lo, hi float64, loOpen bool) (ok, bad []check) {
		low, out := lo, below(lo)
		if loOpen {
			low, out = above(lo), lo
		}
		for _, v := range []float64{low, hi} {
			ok = append(ok, check{name, func(z *Zone) { set(z, v) }})
		}
		for _, v := range []float64{out, above(hi)} {
			bad = append(bad, check{name, func(z *Zone) { set(z, v) }})
		}
		return ok, bad
	}
	i := func(name string, set func(*Zone, int), lo, hi int) (ok, bad []check) {
		for _, v := range []int{lo, hi} {
			ok = append(ok, check{name, func(z *Zone) { set(z, v) }})
		}
		for _, v := range []int{lo - 1, hi + 1} {
			bad = append(bad, check{name, func(z *Zone) { set(z, v) }})
		}
		return ok, bad
	}
	var ok, bad []check
	add := func(o, b []check) { ok, bad = append(ok, o...), append(bad, b...) }
	add(f("kc", func(z *Zone, v float64) { z.Crop.Kc = v }, MinKc, MaxKc, false))
	add(f("season kc", func(z *Zone, v float64) {
		z.Crop.Season = &Season{StartMonth: 4, StartDay: 1, Initial: 20, Development: 30, Mid: 40, Late: 20, KcIni: 0.4, KcMid: v, KcEnd: 0.6, OffSeason: 0.3}
	}, MinKc, MaxKc, false))
	add(f("rate", func(z *Zone, v float64) { z.System.Rate = v }, 0, MaxRate, true))
	add(f("efficiency", func(z *Zone, v float64) { z.System.Efficiency = v }, 0, MaxEfficiency, true))
	add(i("min minutes", func(z *Zone, v int) {
		z.System.MinMinutes, z.System.MaxMinutes, z.System.MaxPerDay = v, MaxRunMinutes, MaxRunMinutes
	}, MinRunMinutes, MaxRunMinutes))
	add(i("max minutes", func(z *Zone, v int) { z.System.MinMinutes, z.System.MaxMinutes = min(v, MinRunMinutes), v }, MinRunMinutes, MaxRunMinutes))
	add(i("max minutes per day", func(z *Zone, v int) {
		z.System.MinMinutes, z.System.MaxMinutes, z.System.MaxPerDay = min(v, MinRunMinutes), min(v, MinRunMinutes), v
	}, MinRunMinutes, MaxRunMinutes))
	add(i("max missing hours", func(z *Zone, v int) { z.FailSafe.MaxMissingHours = v }, MinMissingHours, MaxMissingHoursCap))
	add(f("fallback ET", func(z *Zone, v float64) {
		z.FailSafe.Fallback = true
		for m := range z.FailSafe.FallbackET {
			z.FailSafe.FallbackET[m] = v
		}
	}, 0, MaxFallbackET, true))
	add(f("p", func(z *Zone, v float64) { z.Soil.P = v }, MinP, MaxP, false))
	add(f("root depth", func(z *Zone, v float64) { z.Soil.RootMax = v }, 0, MaxRootDepth, true))
	add(f("field capacity", func(z *Zone, v float64) { z.Soil.FieldCapacity, z.Soil.WiltingPoint, z.Soil.AvailableWater = v, 0, 0 }, 0, MaxFieldCapacity, true))
	// Available water 0 means "from field capacity and wilting point": only
	// the upper bound can be crossed.
	aw, awBad := f("available water", func(z *Zone, v float64) { z.Soil.AvailableWater = v }, 0, MaxAvailableWater, true)
	add(aw, awBad[1:])
	add(i("command attempts", func(z *Zone, v int) { z.Policy.MaxAttempts = v }, 1, MaxCommandAttempts))
	add(f("overrun margin", func(z *Zone, v float64) { z.Policy.OverrunMargin = v }, 0, MaxOverrunMargin, false))
	add(i("season length", func(z *Zone, v int) {
		z.Crop.Season = &Season{StartMonth: 4, StartDay: 1, Initial: v - 3, Development: 1, Mid: 1, Late: 1, KcIni: 0.4, KcMid: 1, KcEnd: 0.6, OffSeason: 0.3}
	}, 4, MaxSeasonDays))
	for _, c := range ok {
		z := maizeZone()
		c.set(z)
		assert.NoError(t, z.Validate(), "%s at a bound: %+v", c.name, z)
	}
	for _, c := range bad {
		z := maizeZone()
		c.set(z)
		assert.ErrorIs(t, z.Validate(), ErrInput, "%s outside its bounds: %+v", c.name, z)
	}
}
