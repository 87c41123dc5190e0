package controllers

import (
	"math"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
	"pgregory.net/rapid"
)

func genZone(t *rapid.T, id string) *Zone {
	fc := rapid.Float64Range(0.08, 0.45).Draw(t, "fc")
	z := maizeZone()
	z.ID = id
	z.Valve = id
	z.Soil = Soil{
		FieldCapacity:  fc,
		WiltingPoint:   rapid.Float64Range(0, fc*0.9).Draw(t, "wp"),
		RootMax:        rapid.Float64Range(0.05, 2).Draw(t, "zr"),
		P:              rapid.Float64Range(0.1, 0.8).Draw(t, "p"),
		AdjustP:        rapid.Bool().Draw(t, "adjustP"),
		TriggerMM:      rapid.SampledFrom([]float64{0, 1, 10, 40}).Draw(t, "trigger"),
		RefillFraction: rapid.Float64Range(0, 0.5).Draw(t, "refill"),
	}
	z.Crop = Crop{Kc: rapid.Float64Range(0, 1.4).Draw(t, "kc")}
	z.Rain = rapid.SampledFrom([]EffectiveRain{{Method: RainAll}, {Method: RainNone},
		{Method: RainFractionAboveThreshold, Fraction: 0.75, Threshold: 1}}).Draw(t, "rain")
	cycle := rapid.SampledFrom([]int{0, 20, 45, 90}).Draw(t, "cycle")
	min := rapid.IntRange(1, 30).Draw(t, "min")
	if cycle > 0 && min > cycle/2 {
		min = cycle / 2
	}
	maxRun := rapid.IntRange(min, 900).Draw(t, "max")
	z.System = System{
		Kind:         rapid.SampledFrom([]SystemKind{Sprinkler, Drip, MicroSprinkler}).Draw(t, "kind"),
		Rate:         rapid.Float64Range(0.2, 60).Draw(t, "rate"),
		Efficiency:   rapid.Float64Range(0.3, 1).Draw(t, "eff"),
		MinMinutes:   min,
		MaxMinutes:   maxRun,
		MaxPerDay:    rapid.IntRange(min, 1440).Draw(t, "perDay"),
		CycleMinutes: cycle,
		SoakMinutes:  rapid.IntRange(1, 60).Draw(t, "soak"),
	}
	z.Area = rapid.Float64Range(100, 50000).Draw(t, "area")
	z.Windows = []Window{rapid.SampledFrom([]Window{{21 * 60, 5 * 60}, {0, 1439}, {22 * 60, 23 * 60}, {4 * 60, 6 * 60}}).Draw(t, "window")}
	if err := z.Validate(); err != nil {
		t.Fatalf("generated zone invalid: %v", err)
	}
	return z
}

// Depletion stays within [0, TAW] and water is conserved over any run of
// hours, revisions and credits: Σ ETc - Σ eff rain - Σ irrigation =
// ΔDr - Σ DP (FAO-56 eq. 85 summed), to rounding.
func TestPropertyBalance(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		z := genZone(t, "p")
		taw := z.Soil.TAW(z.Soil.RootMax)
		st := &State{Depletion: rapid.Float64Range(0, taw).Draw(t, "d0")}
		d0 := st.Depletion
		var sumETc, sumEff, sumIrr, sumDP, sumAdj float64
		n := rapid.IntRange(1, 120).Draw(t, "n")
		next := 0
		for i := 0; i < n; i++ {
			var s Step
			switch rapid.IntRange(0, 5).Draw(t, "op") {
			case 0:
				var err error
				s, err = z.Credit(st, "c", rapid.Float64Range(0, 60).Draw(t, "irr"), at(1, 0, 0).Add(time.Duration(next)*time.Hour))
				require.NoError(t, err)
			case 1:
				if next == 0 {
					continue
				}
				h := rapid.IntRange(0, next-1).Draw(t, "revHour")
				in := validHour(h, rapid.Float64Range(-0.1, 1.5).Draw(t, "et"), rapid.Float64Range(0, 20).Draw(t, "rr"))
				in.Revision = rapid.IntRange(1, 4).Draw(t, "rev")
				var err error
				s, _, err = z.StepHour(st, in)
				require.NoError(t, err)
			default:
				in := validHour(next, rapid.Float64Range(-0.1, 1.5).Draw(t, "et"), 0)
				if rapid.IntRange(0, 4).Draw(t, "rainy") == 0 {
					in.Rain = rapid.Float64Range(0, 30).Draw(t, "r")
				}
				in.Valid = rapid.IntRange(0, 9).Draw(t, "missing") != 0
				next++
				var err error
				s, _, err = z.StepHour(st, in)
				require.NoError(t, err)
			}
			sumETc += s.ETc
			sumEff += s.EffRain
			sumIrr += s.Irrigation
			sumDP += s.Drainage
			sumAdj += s.Adjust
			if st.Depletion < 0 || st.Depletion > taw+1e-9 {
				t.Fatalf("depletion %v outside [0, %v]", st.Depletion, taw)
			}
			if s.Ks < 0 || s.Ks > 1 {
				t.Fatalf("Ks %v outside [0, 1]", s.Ks)
			}
		}
		lhs := sumETc - sumEff - sumIrr
		rhs := st.Depletion - d0 - sumDP + sumAdj
		if math.Abs(lhs-rhs) > 1e-6 {
			t.Fatalf("water not conserved: ΣETc-ΣPeff-ΣI = %v, ΔDr-ΣDP = %v", lhs, rhs)
		}
	})
}

// No command ever exceeds a zone's per-run, per-cycle or per-day cap, and no
// source exceeds its valve or flow limit, whatever the inputs.
func TestPropertyCaps(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		nz := rapid.IntRange(1, 4).Draw(t, "zones")
		src := Source{ID: "lowmead-pump", MaxValves: rapid.IntRange(0, 3).Draw(t, "valves")}
		if rapid.Bool().Draw(t, "flowLimit") {
			src.MaxFlow = rapid.Float64Range(100, 20000).Draw(t, "maxFlow")
		}
		now := at(1, rapid.IntRange(0, 23).Draw(t, "hour"), rapid.IntRange(0, 59).Draw(t, "minute"))
		var zones []ZoneInput
		var ledger []Command
		for i := 0; i < nz; i++ {
			z := genZone(t, string(rune('a'+i)))
			taw := z.Soil.TAW(z.Soil.RootMax)
			st := withWeather(&State{Depletion: rapid.Float64Range(0, taw).Draw(t, "d")}, now)
			zones = append(zones, ZoneInput{z, st})
			for j := rapid.IntRange(0, 3).Draw(t, "prior"); j > 0; j-- {
				ledger = append(ledger, Command{
					ID: "prior", Zone: z.ID, Source: z.Source, Flow: z.Flow(),
					Minutes: rapid.IntRange(1, 600).Draw(t, "pm"),
					Start:   now.Add(-time.Duration(rapid.IntRange(0, 30*60).Draw(t, "ago")) * time.Minute),
					State:   rapid.SampledFrom([]CommandState{Finished, Failed, Expired, Cancelled}).Draw(t, "ps"),
				})
			}
		}
		plan := PlanRuns(now, zones, []Source{src}, ledger, Holds{})
		byID := zoneIndex(zones)
		day := dayUse(ledger, byID)
		event := map[string]int{}
		for _, c := range plan.Commands {
			z := byID[c.Zone]
			if c.Minutes < 1 || c.Minutes > z.System.MaxMinutes || (z.System.CycleMinutes > 0 && c.Minutes > z.System.CycleMinutes) {
				t.Fatalf("command %s of %d minutes breaks a cap of zone %+v", c.ID, c.Minutes, z.System)
			}
			if c.Minutes < z.System.MinMinutes {
				t.Fatalf("command %s of %d minutes below the minimum %d", c.ID, c.Minutes, z.System.MinMinutes)
			}
			event[c.Zone] += c.Minutes
			if event[c.Zone] > z.System.MaxMinutes {
				t.Fatalf("zone %s planned %d minutes in one run, cap %d", c.Zone, event[c.Zone], z.System.MaxMinutes)
			}
			key := c.Zone + "/" + dayKey(c.Start, z.Loc)
			day[key] += c.Minutes
			if day[key] > z.System.MaxPerDay {
				t.Fatalf("zone %s: %d minutes on %s, cap %d", c.Zone, day[key], key, z.System.MaxPerDay)
			}
			if slot, ok := SlotAt(z.Windows, z.Loc, c.Start); !ok || c.Start.Add(time.Duration(c.Minutes)*time.Minute).After(slot.End) {
				t.Fatalf("command %s outside its window", c.ID)
			}
		}
		// Source limits at every command start.
		for _, c := range plan.Commands {
			n, f := 0, 0.0
			for _, o := range plan.Commands {
				if !o.Start.After(c.Start) && o.Start.Add(time.Duration(o.Minutes)*time.Minute).After(c.Start) {
					n++
					f += o.Flow
				}
			}
			if (src.MaxValves > 0 && n > src.MaxValves) || (src.MaxFlow > 0 && f > src.MaxFlow+1e-6) {
				t.Fatalf("source over its limit at %v: %d valves, %.0f L/min", c.Start, n, f)
			}
		}
	})
}

// Minutes scale inversely with the application rate: the rounded-up minutes
// always cover the need, never by more than one minute of water, and never
// grow when the rate grows.
func TestPropertyMinutesInverseRate(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		net := rapid.Float64Range(0.01, 100).Draw(t, "net")
		eff := rapid.Float64Range(0.3, 1).Draw(t, "eff")
		rate := rapid.Float64Range(0.1, 50).Draw(t, "rate")
		k := rapid.Float64Range(1, 10).Draw(t, "k")
		m := GrossMinutes(net, eff, rate)
		exact := net / eff / rate * 60
		if exact > 1440 {
			return
		}
		if float64(m) < exact-1e-6 || float64(m)-1 >= exact {
			t.Fatalf("minutes %d for exact %v", m, exact)
		}
		if m2 := GrossMinutes(net, eff, rate*k); m2 > m {
			t.Fatalf("rate x%v gave more minutes: %d > %d", k, m2, m)
		}
		if m2 := GrossMinutes(net, eff, rate*k); math.Abs(float64(m2)-exact/k) > 1 {
			t.Fatalf("rate x%v: %d minutes, want about %v", k, m2, exact/k)
		}
	})
}
