package controllers

import (
	"math"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// Table values below are FAO-56 figures recalled from memory (no document at
// hand); every derived number is worked by hand from the published equations
// in the comment beside it.

// loam returns a loam soil under maize:
// FAO-56 Table 19 (from memory): loam θFC 0.20-0.30, θWP 0.07-0.17; the
// mid-range values 0.25 and 0.12 are used.
// FAO-56 Table 22 (from memory): maize (grain) Zr 1.0-1.7 m, p 0.55; the
// lower root depth 1.0 m is used.
func loam() Soil {
	return Soil{FieldCapacity: 0.25, WiltingPoint: 0.12, RootMax: 1.0, P: 0.55}
}

func TestTAWRAWLoamMaize(t *testing.T) {
	s := loam()
	require.NoError(t, s.Validate())
	// FAO-56 eq. 82: TAW = 1000 (0.25 - 0.12) 1.0 = 130 mm.
	assert.InDelta(t, 130.0, s.TAW(1.0), 1e-9)
	// FAO-56 eq. 83: RAW = 0.55 x 130 = 71.5 mm.
	assert.InDelta(t, 71.5, RAW(s.P, s.TAW(1.0)), 1e-9)
	// Available water per metre given directly replaces the θ difference:
	// 140 mm/m x 1.2 m = 168 mm.
	s.AvailableWater = 140
	assert.InDelta(t, 168.0, s.TAW(1.2), 1e-9)
}

func TestTAWSandySiltLoam(t *testing.T) {
	// FAO-56 Table 19 (from memory): sand θFC 0.07-0.17, θWP 0.02-0.07,
	// θFC-θWP 0.05-0.11; silt loam θFC 0.22-0.36, θWP 0.09-0.21, 0.13-0.19.
	// Upper ends of the θFC-θWP column, Zr 0.5 m (hand arithmetic, eq. 82):
	sand := Soil{FieldCapacity: 0.17, WiltingPoint: 0.06, RootMax: 0.5, P: 0.5}
	assert.InDelta(t, 55.0, sand.TAW(0.5), 1e-9) // 1000 x 0.11 x 0.5
	silt := Soil{FieldCapacity: 0.36, WiltingPoint: 0.17, RootMax: 0.5, P: 0.5}
	assert.InDelta(t, 95.0, silt.TAW(0.5), 1e-9) // 1000 x 0.19 x 0.5
}

func TestPAdjustment(t *testing.T) {
	// FAO-56 Table 22 footnote: p = p_table + 0.04 (5 - ETc), limited to 0.1-0.8.
	s := loam()
	s.AdjustP = true
	assert.InDelta(t, 0.47, s.PFor(7), 1e-9) // 0.55 + 0.04 (5 - 7) = 0.47
	assert.InDelta(t, 0.67, s.PFor(2), 1e-9) // 0.55 + 0.04 (5 - 2) = 0.67
	assert.InDelta(t, 0.75, s.PFor(0), 1e-9) // 0.55 + 0.04 x 5 = 0.75
	s.P = 0.65
	assert.InDelta(t, 0.80, s.PFor(0), 1e-9) // 0.65 + 0.20 = 0.85 -> limited to 0.8
	s.P = 0.55
	assert.InDelta(t, 0.10, s.PFor(20), 1e-9) // 0.55 - 0.60 = -0.05 -> 0.1
	assert.InDelta(t, 0.55, s.PFor(-1), 1e-9) // unknown ETc: table value
	// RAW with ETc = 7 mm/d: 0.47 x 130 = 61.1 mm (eq. 83).
	assert.InDelta(t, 61.1, RAW(s.PFor(7), 130), 1e-9)
}

func TestKs(t *testing.T) {
	// FAO-56 eq. 84 with TAW 130 mm, p 0.55 (RAW 71.5 mm):
	assert.Equal(t, 1.0, Ks(71.5, 130, 0.55)) // Dr <= RAW: no stress
	// Dr = 100: Ks = (130 - 100) / ((1 - 0.55) 130) = 30 / 58.5 = 0.512821.
	assert.InDelta(t, 0.512821, Ks(100, 130, 0.55), 1e-6)
	assert.Equal(t, 0.0, Ks(130, 130, 0.55)) // Dr = TAW: Ks = 0
	assert.Equal(t, 0.0, Ks(140, 130, 0.55)) // never negative
}

// tomatoSeason is a tomato curve. FAO-56 Table 11 (from memory): tomato
// stage lengths 30/40/40/25 days (one of the listed regions); FAO-56 Table 12
// (from memory): Kc ini 0.6, Kc mid 1.15, Kc end 0.70-0.90 (0.80 used),
// maximum crop height 0.6 m.
func tomatoSeason() *Season {
	return &Season{StartMonth: time.April, StartDay: 1, Initial: 30, Development: 40, Mid: 40, Late: 25,
		KcIni: 0.6, KcMid: 1.15, KcEnd: 0.80, OffSeason: 0.3}
}

func TestKcCurveEq66(t *testing.T) {
	s := tomatoSeason()
	require.NoError(t, s.Validate())
	assert.Equal(t, 0.6, s.KcAt(1))
	assert.Equal(t, 0.6, s.KcAt(30))
	// Development, day 50: 0.6 + (50 - 30)/40 x (1.15 - 0.6) = 0.6 + 0.275 = 0.875 (eq. 66).
	assert.InDelta(t, 0.875, s.KcAt(50), 1e-12)
	assert.InDelta(t, 1.15, s.KcAt(70), 1e-12) // end of development
	assert.Equal(t, 1.15, s.KcAt(110))         // mid-season
	// Late, day 120: 1.15 + (120 - 110)/25 x (0.80 - 1.15) = 1.15 - 0.14 = 1.01 (eq. 66).
	assert.InDelta(t, 1.01, s.KcAt(120), 1e-12)
	assert.InDelta(t, 0.80, s.KcAt(135), 1e-12)
	assert.Equal(t, 0.3, s.KcAt(136)) // off season

	loc := time.FixedZone("std", -8*3600)
	i, in := s.Day(time.Date(2026, 5, 20, 23, 30, 0, 0, loc)) // April 1 is day 1: May 20 is day 50
	assert.True(t, in)
	assert.Equal(t, 50, i)
	c := Crop{Season: s}
	assert.InDelta(t, 0.875, c.KcOn(time.Date(2026, 5, 20, 23, 30, 0, 0, loc)), 1e-12)
	_, in = s.Day(time.Date(2026, 3, 31, 12, 0, 0, 0, loc))
	assert.False(t, in)
}

func TestKcSeasonOverNewYear(t *testing.T) {
	// A southern-hemisphere season from 1 November: 10 January is day 71.
	s := Season{StartMonth: time.November, StartDay: 1, Initial: 20, Development: 40, Mid: 60, Late: 30,
		KcIni: 0.4, KcMid: 1.0, KcEnd: 0.6, OffSeason: 0.2}
	i, in := s.Day(time.Date(2027, 1, 10, 6, 0, 0, 0, time.UTC))
	require.True(t, in)
	assert.Equal(t, 30+31+10, i) // Nov 30 days + Dec 31 days + 10
	assert.Equal(t, 1.0, s.KcAt(i))
}

func TestClimateAdjustmentEq62(t *testing.T) {
	// FAO-56 eq. 62 for tomato Kc mid 1.15 (Table 12, from memory), u2 = 3 m/s,
	// RHmin = 30 %, h = 0.6 m:
	// [0.04 (3 - 2) - 0.004 (30 - 45)] = 0.04 + 0.06 = 0.10;
	// (0.6/3)^0.3 = exp(0.3 ln 0.2) = exp(-0.482831) = 0.617034;
	// Kc mid = 1.15 + 0.10 x 0.617034 = 1.211703.
	c := Climate{U2: 3, RHMin: 30, Height: 0.6}
	assert.InDelta(t, 1.211703, c.AdjustKc(1.15), 1e-6)
	// Limits of validity: u2 8 m/s is used as 6, RHmin 10 % as 20:
	// [0.04 x 4 + 0.004 x 25] = 0.26; Kc = 1.15 + 0.26 x 0.617034 = 1.310429.
	c = Climate{U2: 8, RHMin: 10, Height: 0.6}
	assert.InDelta(t, 1.310429, c.AdjustKc(1.15), 1e-6)
	// eq. 65: Kc end below 0.45 is not adjusted.
	s := tomatoSeason()
	s.KcEnd = 0.40
	crop := Crop{Season: s, Climate: &Climate{U2: 3, RHMin: 30, Height: 0.6}}
	loc := time.UTC
	end := time.Date(2026, 4, 1, 12, 0, 0, 0, loc).AddDate(0, 0, 134) // day 135
	assert.InDelta(t, 0.40, crop.KcOn(end), 1e-12)
	mid := time.Date(2026, 4, 1, 12, 0, 0, 0, loc).AddDate(0, 0, 99) // day 100
	assert.InDelta(t, 1.211703, crop.KcOn(mid), 1e-6)
}

func TestRootGrowth(t *testing.T) {
	// Linear growth from 0.3 m on day 1 to 1.0 m at the start of mid-season
	// (day 70 = 30 + 40), hand arithmetic: day 35.5 would be half way; day
	// 24: 0.3 + 23/69 x 0.7 = 0.533333.
	s := loam()
	s.RootMin = 0.3
	season := tomatoSeason()
	day := func(i int) time.Time { return time.Date(2026, 4, 1, 12, 0, 0, 0, time.UTC).AddDate(0, 0, i-1) }
	assert.InDelta(t, 0.3, s.RootDepth(season, day(1)), 1e-12)
	assert.InDelta(t, 0.533333, s.RootDepth(season, day(24)), 1e-6)
	assert.InDelta(t, 1.0, s.RootDepth(season, day(70)), 1e-12)
	assert.InDelta(t, 1.0, s.RootDepth(season, day(120)), 1e-12)
	assert.InDelta(t, 0.3, s.RootDepth(season, day(200)), 1e-12) // off season
	assert.InDelta(t, 1.0, s.RootDepth(nil, day(24)), 1e-12)     // no season: max
}

func TestEffectiveRain(t *testing.T) {
	e := EffectiveRain{Method: RainFractionAboveThreshold, Fraction: 0.8, Threshold: 0.5}
	require.NoError(t, e.Validate())
	assert.Equal(t, 0.0, e.Of(0.5))
	assert.InDelta(t, 0.8*(4.0-0.5), e.Of(4), 1e-12) // 2.8 mm
	assert.Equal(t, 3.0, EffectiveRain{Method: RainAll}.Of(3))
	assert.Equal(t, 0.0, EffectiveRain{Method: RainNone}.Of(3))
	assert.Equal(t, 0.0, EffectiveRain{Method: RainAll}.Of(math.NaN()))
	assert.ErrorIs(t, EffectiveRain{Method: "guess"}.Validate(), ErrInput)
}
