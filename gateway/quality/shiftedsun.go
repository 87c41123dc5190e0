package quality

import (
	"fmt"
	"math"
	"time"

	"etpulse/hourly"
)

// Rules of the shifted-sun check (common practice, no source): the measured
// radiation of at least shiftMinHours hours (the same hours of the day seen
// on two days) is compared with the computed extraterrestrial radiation
// shifted by -12..12 h. When a shift of at least shiftMinLag hours
// correlates at shiftMinCorr or better, and clearly better than no shift
// (by shiftMinGain), the sun the gateway computes is off in time: a wrong
// station longitude (often its sign) or UTC offset, not a sensor fault.
const (
	shiftMinHours = 36
	shiftMinPairs = 24 // hours compared at each shift (the window's ends drop out)
	shiftMinLag   = 2
	shiftMinCorr  = 0.8
	shiftMinGain  = 0.3
)

// shiftedSun returns by how many hours the measured radiation of the window
// leads the computed sun (positive: it peaks that many hours before the
// computed noon), and whether the window shows such a shift.
func shiftedSun(w []HourObs) (int, bool) {
	ra := make(map[time.Time]float64, len(w))
	n := 0
	for _, o := range w {
		if !o.HasSun {
			continue
		}
		ra[o.Start] = o.Ra
		if _, ok := o.Rs(); ok {
			n++
		}
	}
	if n < shiftMinHours {
		return 0, false
	}
	best, bestCorr := 0, math.Inf(-1)
	corr0 := math.NaN()
	for lag := -12; lag <= 12; lag++ {
		var xs, ys []float64
		for _, o := range w {
			rs, ok := o.Rs()
			r, known := ra[o.Start.Add(time.Duration(lag)*time.Hour)]
			if !o.HasSun || !ok || !known {
				continue
			}
			xs, ys = append(xs, rs), append(ys, r)
		}
		if len(xs) < shiftMinPairs {
			continue
		}
		c := pearson(xs, ys)
		if lag == 0 {
			corr0 = c
		}
		if c > bestCorr {
			best, bestCorr = lag, c
		}
	}
	if math.IsNaN(corr0) || abs(best) < shiftMinLag || bestCorr < shiftMinCorr || bestCorr-corr0 < shiftMinGain {
		return 0, false
	}
	return best, true
}

// pearson is the correlation coefficient of xs and ys (NaN when either is
// constant).
func pearson(xs, ys []float64) float64 {
	var mx, my float64
	for i := range xs {
		mx += xs[i]
		my += ys[i]
	}
	mx /= float64(len(xs))
	my /= float64(len(ys))
	var sxy, sxx, syy float64
	for i := range xs {
		dx, dy := xs[i]-mx, ys[i]-my
		sxy += dx * dy
		sxx += dx * dx
		syy += dy * dy
	}
	return sxy / math.Sqrt(sxx*syy)
}

func abs(v int) int {
	if v < 0 {
		return -v
	}
	return v
}

// nameShiftedSun adds the likely cause to the raised solar findings when the
// window shows the measured sun shifted in time against the computed one.
func nameShiftedSun(fs []Finding, w []HourObs) {
	var bad []*Finding
	for i := range fs {
		if fs[i].Quantity == hourly.Solar && fs[i].Status == StatusBad {
			bad = append(bad, &fs[i])
		}
	}
	if len(bad) == 0 {
		return
	}
	lag, ok := shiftedSun(w)
	if !ok {
		return
	}
	when := fmt.Sprintf("%d h earlier", lag)
	if lag < 0 {
		when = fmt.Sprintf("%d h later", -lag)
	}
	for _, f := range bad {
		f.Message += fmt.Sprintf("; measured radiation follows the computed sun %s on consecutive days: likely cause the station longitude or UTC offset (longitude east positive, offset of standard time), not the sensor", when)
	}
}
