package controllers

import (
	"time"
)

// Limit names what bounds the longest run of a window occurrence.
type Limit string

// The limits of a run.
const (
	LimitWindow Limit = "window"      // the window's length (cycles and soaks included)
	LimitRun    Limit = "max minutes" // System.MaxMinutes
	LimitDay    Limit = "day cap"     // System.MaxPerDay
)

// WindowRun is the longest run one occurrence of a window allows.
type WindowRun struct {
	Window  Window
	Minutes int     // valve minutes, all cycles together; 0 when not even MinMinutes fit
	Cycles  int     // cycles of the run (SplitCycles)
	Net     float64 // net depth delivered, mm: Minutes/60 x rate x efficiency
	Limit   Limit   // what bounds Minutes
}

// MinutesFor returns the valve minutes needed to put net mm into the root
// zone, unrounded and uncapped: net / efficiency / rate x 60 (the arithmetic
// of GrossMinutes). 0 for a depth <= 0.
func (z *Zone) MinutesFor(net float64) float64 {
	s := z.System
	if !(net > 0) || !(s.Efficiency > 0) || !(s.Rate > 0) {
		return 0
	}
	return net / s.Efficiency / s.Rate * 60
}

// WindowRun returns the longest run one occurrence of w allows: the most
// minutes r within MaxMinutes and MaxPerDay whose cycles and soaks fit the
// window, r + (cycles - 1) x soak <= window length, with cycles from
// SplitCycles; 0 minutes when that is below MinMinutes.
func (z *Zone) WindowRun(w Window) WindowRun {
	s := z.System
	length := int(w.length() / time.Minute)
	limit, cap := LimitRun, s.MaxMinutes
	if s.MaxPerDay < cap {
		limit, cap = LimitDay, s.MaxPerDay
	}
	out := WindowRun{Window: w, Limit: limit}
	for r := cap; r >= s.MinMinutes && r > 0; r-- {
		n := len(SplitCycles(r, s.CycleMinutes))
		if r+(n-1)*s.SoakMinutes <= length {
			out.Minutes, out.Cycles = r, n
			break
		}
		out.Limit = LimitWindow
	}
	if out.Minutes == 0 {
		out.Limit = LimitWindow
	}
	out.Net = NetMM(float64(out.Minutes), s.Rate, s.Efficiency)
	return out
}

// BestWindowRun returns the WindowRun of the zone's window that allows the
// longest run (the first of equals); zero when the zone has no window.
func (z *Zone) BestWindowRun() WindowRun {
	var best WindowRun
	for i, w := range z.Windows {
		if r := z.WindowRun(w); i == 0 || r.Minutes > best.Minutes {
			best = r
		}
	}
	return best
}

// DailyCapacity returns the valve minutes and net depth, mm, the zone can
// receive in one day: one longest run per window occurrence (WindowRun),
// summed over its windows and limited to MaxPerDay. Compared with the crop's
// peak ETc it tells whether the zone can keep up.
func (z *Zone) DailyCapacity() (int, float64) {
	m := 0
	for _, w := range z.Windows {
		m += z.WindowRun(w).Minutes
	}
	m = min(m, z.System.MaxPerDay)
	return m, NetMM(float64(m), z.System.Rate, z.System.Efficiency)
}

// PeakKc returns the largest crop coefficient of the year: the constant Kc,
// or the highest Kc of the season curve on any day (climate adjustment of
// FAO-56 eq. 62/65 included, off-season Kc too), as KcOn gives it.
func (z *Zone) PeakKc() float64 {
	if z.Crop.Season == nil {
		return z.Crop.Kc
	}
	peak := 0.0
	day := time.Date(2024, 1, 1, 12, 0, 0, 0, time.UTC) // a leap year: every calendar day
	for i := 0; i < 366; i++ {
		peak = max(peak, z.Crop.KcOn(day.AddDate(0, 0, i)))
	}
	return peak
}

// PeakETc returns the crop ET of the peak month, mm/day, for a peak
// reference ET refET mm/day: PeakKc x refET (FAO-56 eq. 56, ETc = Kc ETo),
// times the cover transmission when the zone has one, as in the balance.
func (z *Zone) PeakETc(refET float64) float64 {
	cover := z.Cover
	if cover == 0 {
		cover = 1
	}
	return z.PeakKc() * refET * cover
}

// TAWRange returns the smallest and the largest TAW of the year, mm (FAO-56
// eq. 82): at the shallowest root depth (RootMin, when the roots grow over a
// season) and at RootMax.
func (z *Zone) TAWRange() (lo, hi float64) {
	hi = z.Soil.TAW(z.Soil.RootMax)
	lo = hi
	if z.Crop.Season != nil && z.Soil.RootMin > 0 && z.Soil.RootMin < z.Soil.RootMax {
		lo = z.Soil.TAW(z.Soil.RootMin)
	}
	return lo, hi
}
