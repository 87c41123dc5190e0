package controllers

import (
	"testing"

	"github.com/stretchr/testify/assert"
)

func TestMinutesForHandWorked(t *testing.T) {
	z := maizeZone() // 5 mm/h, efficiency 0.75
	// RAW of loam: 0.55 x 130 = 71.5 mm (FAO-56 eq. 83); gross 71.5 / 0.75 =
	// 95.333 mm at 5 mm/h = 19.0667 h = 1144 minutes.
	assert.InDelta(t, 1144, z.MinutesFor(71.5), 1e-9)
	assert.Equal(t, 0.0, z.MinutesFor(0))
	assert.Equal(t, 0.0, z.MinutesFor(-3))
}

func TestWindowRunCaps(t *testing.T) {
	z := maizeZone() // window 21:00-05:00 = 480 min; max 600 per run, 720 per day
	r := z.WindowRun(z.Windows[0])
	assert.Equal(t, 480, r.Minutes)
	assert.Equal(t, LimitWindow, r.Limit)
	assert.InDelta(t, 30, r.Net, 1e-9) // 480/60 x 5 x 0.75

	z.System.MaxMinutes = 360
	r = z.WindowRun(z.Windows[0])
	assert.Equal(t, 360, r.Minutes)
	assert.Equal(t, LimitRun, r.Limit)
	assert.InDelta(t, 22.5, r.Net, 1e-9)

	z.System.MaxMinutes, z.System.MaxPerDay = 600, 300
	r = z.WindowRun(z.Windows[0])
	assert.Equal(t, 300, r.Minutes)
	assert.Equal(t, LimitDay, r.Limit)

	// Cycle and soak: 120-minute cycles with 45-minute soaks. 360 minutes are
	// 3 cycles and 2 soaks = 450 minutes of window; 361 would need a 4th
	// cycle and a 3rd soak: 361 + 135 = 496 > 480. So 360, bounded by the
	// window once its soaks are counted.
	z.System.MaxPerDay = 720
	z.System.CycleMinutes, z.System.SoakMinutes = 120, 45
	r = z.WindowRun(z.Windows[0])
	assert.Equal(t, 360, r.Minutes)
	assert.Equal(t, 3, r.Cycles)
	assert.Equal(t, LimitWindow, r.Limit)

	// A window too short for the minimum run delivers nothing.
	r = z.WindowRun(Window{Start: 6 * 60, End: 6*60 + 5})
	assert.Equal(t, 0, r.Minutes)
	assert.Equal(t, 0.0, r.Net)
}

func TestDailyCapacity(t *testing.T) {
	z := maizeZone()
	z.Windows = append(z.Windows, Window{Start: 12 * 60, End: 14 * 60})
	// 480 + 120 minutes, one run per window occurrence, within the 720/day cap.
	m, net := z.DailyCapacity()
	assert.Equal(t, 600, m)
	assert.InDelta(t, 37.5, net, 1e-9) // 600/60 x 5 x 0.75
	z.System.MaxPerDay = 500
	m, net = z.DailyCapacity()
	assert.Equal(t, 500, m)
	assert.InDelta(t, 31.25, net, 1e-9)
	best := z.BestWindowRun()
	assert.Equal(t, z.Windows[0], best.Window)
	assert.Equal(t, 480, best.Minutes)
}

func TestPeakKcAndETc(t *testing.T) {
	z := maizeZone()
	assert.Equal(t, 1.2, z.PeakKc()) // constant Kc
	assert.InDelta(t, 8.4, z.PeakETc(7), 1e-12)

	// Maize curve with the FAO-56 eq. 62 climate adjustment of Kc mid
	// (Table 12 Kc mid 1.20, from memory): u2 2.5 m/s, RHmin 30 %, h 2 m:
	// 1.20 + [0.04 (2.5 - 2) - 0.004 (30 - 45)] (2/3)^0.3
	// = 1.20 + 0.08 x 0.885467 = 1.270837 (derived by hand from eq. 62).
	z.Crop = Crop{
		Season:  &Season{StartMonth: 5, StartDay: 10, Initial: 30, Development: 40, Mid: 50, Late: 30, KcIni: 0.3, KcMid: 1.2, KcEnd: 0.35, OffSeason: 0.3},
		Climate: &Climate{U2: 2.5, RHMin: 30, Height: 2},
	}
	assert.InDelta(t, 1.270837, z.PeakKc(), 1e-6)
	// A season over the new year still finds its mid-season Kc.
	z.Crop.Season.StartMonth, z.Crop.Season.StartDay = 11, 20
	assert.InDelta(t, 1.270837, z.PeakKc(), 1e-6)

	// A cover scales the reference ET, as in the balance.
	z.Crop = Crop{Kc: 1.0}
	z.Cover = 0.7
	assert.InDelta(t, 4.2, z.PeakETc(6), 1e-12)
}

func TestTAWRange(t *testing.T) {
	z := maizeZone() // 130 mm/m, constant depth 1.0 m
	lo, hi := z.TAWRange()
	assert.InDelta(t, 130, lo, 1e-9)
	assert.InDelta(t, 130, hi, 1e-9)
	z.Crop = Crop{Season: &Season{StartMonth: 5, StartDay: 10, Initial: 30, Development: 40, Mid: 50, Late: 30, KcIni: 0.3, KcMid: 1.2, KcEnd: 0.35}}
	z.Soil.RootMin = 0.3
	lo, hi = z.TAWRange() // FAO-56 eq. 82: 130 x 0.3 and 130 x 1.0
	assert.InDelta(t, 39, lo, 1e-9)
	assert.InDelta(t, 130, hi, 1e-9)
}
