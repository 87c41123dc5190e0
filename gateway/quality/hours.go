package quality

import (
	"fmt"
	"math"
	"slices"
	"strings"
	"time"

	"etpulse/gateway/alert"
	"etpulse/gateway/config"
	"etpulse/hourly"
)

// Rules of the hour-level checks that are not configurable (common
// practice, no source).
const (
	// clearSunRad: hours with the sun above this elevation (rad) judge
	// whether a day looks clear; the same limit decides when fcd is computed
	// (ASCE-EWRI 2005, notes to eq. 45).
	clearSunRad = 0.3
	// clearMinRatio: a day whose hourly Rs/Rso is steady but below this is
	// uniform overcast, not a clear day seen through a dirty dome.
	clearMinRatio = 0.5
	// minDayHours: a day needs this many closed hours to be judged.
	minDayHours = 20
	// minDaylightCoverage: fraction of its daylight hours that must carry
	// solar readings for a day's Rs/Rso to be judged.
	minDaylightCoverage = 0.9
	// minNightHours: a night needs this many dark hours with humidity.
	minNightHours = 4
	// driftMargin: a humidity drift alert clears when a night reaches the
	// limit plus this many % RH.
	driftMargin = 3.0
	// nightSolarClearFraction: a night-solar alert clears when a dark hour
	// is at most this fraction of the limit.
	nightSolarClearFraction = 0.5
	// neighbourClearFraction: a departure alert clears when the latest day is
	// within this fraction of the tolerance.
	neighbourClearFraction = 0.75
)

// QStats summarises one quantity over one hour (canonical units).
type QStats struct {
	N    int     `json:"n"`
	Min  float64 `json:"min"`
	Max  float64 `json:"max"`
	Mean float64 `json:"mean"`
}

// HourObs is what the hour-level checks keep of one closed station-hour.
type HourObs struct {
	Start        time.Time                  `json:"start"`    // hour start, UTC
	Local        time.Time                  `json:"local"`    // hour start as station standard wall-clock time (location UTC)
	HasSun       bool                       `json:"has_sun"`  // SunElevation, Ra and Rso are known
	SunElevation float64                    `json:"sun_rad"`  // sun elevation at mid-hour, rad
	Ra           float64                    `json:"ra_mj"`    // extraterrestrial radiation, MJ m-2 h-1
	Rso          float64                    `json:"rso_mj"`   // clear-sky radiation, MJ m-2 h-1
	Ea           float64                    `json:"ea_kpa"`   // mean actual vapour pressure, kPa; 0 when unknown
	Q            map[hourly.Quantity]QStats `json:"q"`        // per-quantity summary of the readings
	Revision     int                        `json:"revision"` // revision of the record it came from
}

// Rs returns the measured solar radiation of the hour in MJ m-2 h-1 (mean
// W m-2 x 3600 s x 1e-6 MJ/J = x 0.0036) and whether it was measured.
func (o HourObs) Rs() (float64, bool) {
	s, ok := o.Q[hourly.Solar]
	if !ok || s.N == 0 {
		return 0, false
	}
	return math.Max(s.Mean, 0) * 0.0036, true
}

func (o HourObs) day() bool               { return o.HasSun && o.SunElevation > 0 }
func (o HourObs) dark(limit float64) bool { return o.HasSun && o.SunElevation < limit }

// daytimeOnly lists the quantities whose stuck check counts daytime hours
// only: they legitimately stay at zero all night.
var daytimeOnly = []hourly.Quantity{hourly.Wind, hourly.Solar, hourly.NetRad}

// HourChecks evaluates the single-station hour-level checks on a window of
// closed hours (oldest first, the hour just closed last) and returns their
// findings for station site/station.
func HourChecks(site, station string, cfg *config.Alerts, choices config.StationAlerts, w []HourObs) []Finding {
	if len(w) == 0 {
		return nil
	}
	var out []Finding
	out = append(out, stuckFindings(site, station, cfg, w)...)
	if f, ok := nightSolarFinding(site, station, cfg, w); ok {
		out = append(out, f)
	}
	out = append(out, envelopeFindings(site, station, cfg, w)...)
	if f, ok := calmFinding(site, station, cfg, w); ok {
		out = append(out, f)
	}
	if choices.HumidityDrift {
		if f, ok := humidityDriftFinding(site, station, cfg, w); ok {
			out = append(out, f)
		}
	}
	nameShiftedSun(out, w)
	return out
}

func hourKey(site, station string, q hourly.Quantity, k alert.Kind) alert.Key {
	return alert.Key{Site: site, Station: station, Sensor: alert.HourSubject, Quantity: q, Kind: k}
}

func stuckFindings(site, station string, cfg *config.Alerts, w []HourObs) []Finding {
	last := w[len(w)-1]
	var out []Finding
	for _, q := range hourly.Quantities {
		lim := cfg.Limits(q)
		cur, ok := last.Q[q]
		if lim.StuckHours <= 0 || !ok || cur.N == 0 {
			continue
		}
		dayOnly := slices.Contains(daytimeOnly, q)
		if dayOnly && !last.day() {
			continue // no verdict at night
		}
		run := 0
		var since time.Time
		for i := len(w) - 1; i >= 0; i-- {
			o := w[i]
			if dayOnly && !o.day() {
				continue
			}
			s, ok := o.Q[q]
			if !ok || s.N == 0 {
				break
			}
			if s.Max-s.Min > lim.StuckTolerance || math.Abs(s.Mean-cur.Mean) > lim.StuckTolerance {
				break
			}
			run++
			since = o.Start
		}
		f := Finding{Key: hourKey(site, station, q, alert.KindStuck), Severity: alert.SeverityCritical, Value: float64(run), Limit: float64(lim.StuckHours), At: last.Start.Add(time.Hour)}
		what := "hours"
		if dayOnly {
			what = "daytime hours"
		}
		if run >= lim.StuckHours {
			f.Status = StatusBad
			f.Message = fmt.Sprintf("%s stuck at %s for %d %s since %s, limit %d", q, num(cur.Mean), run, what, since.UTC().Format(time.RFC3339), lim.StuckHours)
		} else {
			f.Status = StatusGood
			f.Message = fmt.Sprintf("%s changing (flat for %d %s)", q, run, what)
		}
		out = append(out, f)
	}
	return out
}

func nightSolarFinding(site, station string, cfg *config.Alerts, w []HourObs) (Finding, bool) {
	dark := *cfg.NightSolar.DarkBelowRad
	limit := *cfg.NightSolar.LimitWm2
	n := cfg.NightSolar.Hours
	last := w[len(w)-1]
	lastS, ok := last.Q[hourly.Solar]
	if !last.dark(dark) || !ok || lastS.N == 0 {
		return Finding{}, false
	}
	var means []float64
	for i := len(w) - 1; i >= 0 && len(means) < n; i-- {
		o := w[i]
		if !o.dark(dark) {
			continue
		}
		s, ok := o.Q[hourly.Solar]
		if !ok || s.N == 0 {
			break
		}
		means = append(means, s.Mean)
	}
	f := Finding{Key: hourKey(site, station, hourly.Solar, alert.KindNightSolar), Severity: alert.SeverityWarning, Value: lastS.Mean, Limit: limit, At: last.Start.Add(time.Hour)}
	lowest := slices.Min(means)
	switch {
	case len(means) == n && lowest > limit:
		f.Status, f.Value = StatusBad, lowest
		f.Message = fmt.Sprintf("solar %s W/m2 or more in each of the last %d dark hours (latest %s W/m2), expected <= %s W/m2", num(lowest), n, num(lastS.Mean), num(limit))
	case lastS.Mean <= limit*nightSolarClearFraction:
		f.Status = StatusGood
		f.Message = fmt.Sprintf("dark-hour solar %s W/m2, within %s W/m2", num(lastS.Mean), num(limit*nightSolarClearFraction))
	default:
		f.Status = StatusHold
	}
	return f, true
}

// dayRatio is one day's comparison of measured radiation with Rso.
type dayRatio struct {
	day        string  // local date
	ratio      float64 // Σ Rs / Σ Rso over the daylight hours with readings
	clearShape bool    // hourly Rs/Rso steady and high enough to look clear
	spread     float64 // coefficient of variation of the hourly Rs/Rso with the sun above clearSunRad
}

// dayRatios returns the judged days of the window, oldest first. The day of
// the latest hour is judged only once its sun has set.
func dayRatios(w []HourObs, clearSpread float64) []dayRatio {
	var out []dayRatio
	last := w[len(w)-1]
	for _, d := range groupBy(w, func(o HourObs) string { return o.Local.Format(time.DateOnly) }) {
		if d.key == last.Local.Format(time.DateOnly) && !(last.HasSun && last.Ra == 0 && last.Local.Hour() >= 12) {
			continue
		}
		if len(d.hours) < minDayHours {
			continue
		}
		var rs, rso float64
		var daylight, measured int
		var hourly []float64
		for _, o := range d.hours {
			if !o.HasSun || o.Ra <= 0 {
				continue
			}
			daylight++
			r, ok := o.Rs()
			if !ok || o.Rso <= 0 {
				continue
			}
			measured++
			rs += r
			rso += o.Rso
			if o.SunElevation > clearSunRad {
				hourly = append(hourly, r/o.Rso)
			}
		}
		if daylight == 0 || float64(measured) < minDaylightCoverage*float64(daylight) || rso <= 0 {
			continue
		}
		dr := dayRatio{day: d.key, ratio: rs / rso, spread: math.Inf(1)}
		if len(hourly) >= 3 {
			m, sd := meanStd(hourly)
			dr.spread = sd / m
			dr.clearShape = m >= clearMinRatio && dr.spread <= clearSpread
		}
		out = append(out, dr)
	}
	return out
}

func envelopeFindings(site, station string, cfg *config.Alerts, w []HourObs) []Finding {
	e := cfg.SolarEnvelope
	last := w[len(w)-1]
	if _, ok := last.Rs(); !ok {
		return nil
	}
	days := dayRatios(w, *e.ClearSpread)
	// Keep the days within the window ending at the latest hour's date.
	cut := last.Local.AddDate(0, 0, -e.Days).Format(time.DateOnly)
	days = slices.DeleteFunc(days, func(d dayRatio) bool { return d.day <= cut })
	if len(days) == 0 {
		return nil
	}
	at := last.Start.Add(time.Hour)
	low, high, margin := *e.LowRatio, *e.HighRatio, *e.Margin

	best, clear := days[0], 0
	for _, d := range days {
		if d.ratio > best.ratio {
			best = d
		}
		if d.clearShape {
			clear++
		}
	}
	lf := Finding{Key: hourKey(site, station, hourly.Solar, alert.KindSolarLow), Severity: alert.SeverityCritical, Value: best.ratio, Limit: low, At: at}
	switch {
	case best.ratio < low && clear >= e.MinClearDays:
		lf.Status = StatusBad
		lf.Message = fmt.Sprintf("max daily Rs/Rso over the last %d days %.2f (%d clear-looking days), expected >= %.2f: pyranometer reads low or is soiled", len(days), best.ratio, clear, low)
	case best.ratio >= low+margin:
		lf.Status = StatusGood
		lf.Message = fmt.Sprintf("max daily Rs/Rso over the last %d days %.2f, expected >= %.2f", len(days), best.ratio, low)
	default:
		lf.Status = StatusHold
	}
	latest := days[len(days)-1]
	hf := Finding{Key: hourKey(site, station, hourly.Solar, alert.KindSolarHigh), Severity: alert.SeverityCritical, Value: latest.ratio, Limit: high, At: at}
	switch {
	case latest.ratio > high:
		hf.Status = StatusBad
		hf.Message = fmt.Sprintf("daily Rs/Rso on %s %.2f, expected <= %.2f: pyranometer reads high or the unit or scale is wrong", latest.day, latest.ratio, high)
	case latest.ratio <= high-margin:
		hf.Status = StatusGood
		hf.Message = fmt.Sprintf("daily Rs/Rso on %s %.2f, expected <= %.2f", latest.day, latest.ratio, high)
	default:
		hf.Status = StatusHold
	}
	return []Finding{lf, hf}
}

func calmFinding(site, station string, cfg *config.Alerts, w []HourObs) (Finding, bool) {
	speed := *cfg.Calm.Speed
	n := cfg.Calm.DaytimeHours
	last := w[len(w)-1]
	lastW, ok := last.Q[hourly.Wind]
	if !last.day() || !ok || lastW.N == 0 {
		return Finding{}, false
	}
	run := 0
	for i := len(w) - 1; i >= 0; i-- {
		o := w[i]
		if !o.day() {
			continue
		}
		s, ok := o.Q[hourly.Wind]
		if !ok || s.N == 0 || s.Max >= speed {
			break
		}
		run++
	}
	f := Finding{Key: hourKey(site, station, hourly.Wind, alert.KindCalm), Severity: alert.SeverityWarning, Value: float64(run), Limit: float64(n), At: last.Start.Add(time.Hour)}
	switch {
	case run >= n:
		f.Status = StatusBad
		f.Message = fmt.Sprintf("wind below %s m/s for %d consecutive daytime hours, limit %d: seized or disconnected anemometer?", num(speed), run, n)
	case lastW.Max >= speed:
		f.Status = StatusGood
		f.Message = fmt.Sprintf("daytime wind up to %s m/s", num(lastW.Max))
	default:
		f.Status = StatusHold
	}
	return f, true
}

// nightSummary is one night's humidity summary.
type nightSummary struct {
	night  string  // local date of the morning that ends the night
	maxRH  float64 // largest relative humidity, %
	minGap float64 // smallest air temperature minus dew point, °C; NaN when unknown
}

// humidityQuantity returns the humidity quantity the station measures.
func humidityQuantity(o HourObs) hourly.Quantity {
	for _, q := range []hourly.Quantity{hourly.RelHumidity, hourly.DewPoint, hourly.VapourPressure} {
		if s, ok := o.Q[q]; ok && s.N > 0 {
			return q
		}
	}
	return ""
}

// nights returns the finished nights of the window, oldest first. A night is
// the dark hours (sun below the horizon) between two days, named by the date
// of its morning.
func nights(w []HourObs) []nightSummary {
	name := func(o HourObs) string {
		if o.Local.Hour() >= 12 {
			return o.Local.AddDate(0, 0, 1).Format(time.DateOnly)
		}
		return o.Local.Format(time.DateOnly)
	}
	var dark []HourObs
	for _, o := range w {
		if o.HasSun && o.SunElevation < 0 {
			dark = append(dark, o)
		}
	}
	last := w[len(w)-1]
	var out []nightSummary
	for _, g := range groupBy(dark, name) {
		if last.HasSun && last.SunElevation < 0 && name(last) == g.key {
			continue // the night is still going on
		}
		ns := nightSummary{night: g.key, maxRH: math.Inf(-1), minGap: math.NaN()}
		n := 0
		for _, o := range g.hours {
			rh, gap, ok := hourHumidity(o)
			if !ok {
				continue
			}
			n++
			ns.maxRH = math.Max(ns.maxRH, rh)
			if !math.IsNaN(gap) && (math.IsNaN(ns.minGap) || gap < ns.minGap) {
				ns.minGap = gap
			}
		}
		if n >= minNightHours {
			out = append(out, ns)
		}
	}
	return out
}

// hourHumidity returns the hour's largest relative humidity (%) and its air
// temperature minus dew point (°C, NaN when unknown).
func hourHumidity(o HourObs) (rh, gap float64, ok bool) {
	t, okT := o.Q[hourly.AirTemp]
	gap = math.NaN()
	if okT && t.N > 0 && o.Ea > 0 {
		gap = t.Mean - hourly.DewPointFromVapourPressure(o.Ea)
	}
	if s, ok := o.Q[hourly.RelHumidity]; ok && s.N > 0 {
		return s.Max, gap, true
	}
	if okT && t.N > 0 && o.Ea > 0 {
		// FAO-56 eq. 10: RH = 100 ea / e°(T), with the hour's mean T.
		return 100 * o.Ea / hourly.SatVapourPressure(t.Mean), gap, true
	}
	return 0, 0, false
}

func humidityDriftFinding(site, station string, cfg *config.Alerts, w []HourObs) (Finding, bool) {
	h := cfg.HumidityDrift
	last := w[len(w)-1]
	q := humidityQuantity(last)
	if q == "" {
		return Finding{}, false
	}
	ns := nights(w)
	if len(ns) == 0 {
		return Finding{}, false
	}
	below, gapLimit := *h.RHBelow, *h.DewGap
	latest := ns[len(ns)-1]
	f := Finding{Key: hourKey(site, station, q, alert.KindHumidityDrift), Severity: alert.SeverityWarning, Value: latest.maxRH, Limit: below, At: last.Start.Add(time.Hour)}
	fails := func(n nightSummary) bool {
		return n.maxRH < below || (gapLimit > 0 && !math.IsNaN(n.minGap) && n.minGap > gapLimit)
	}
	if len(ns) >= h.Nights {
		recent := ns[len(ns)-h.Nights:]
		all := true
		lo, hi := math.Inf(1), math.Inf(-1)
		for _, n := range recent {
			all = all && fails(n)
			lo, hi = math.Min(lo, n.maxRH), math.Max(hi, n.maxRH)
		}
		if all {
			f.Status, f.Value = StatusBad, hi
			f.Message = fmt.Sprintf("nightly max RH over the last %d nights %s-%s %%, expected >= %s %% on at least one night: humidity sensor drifting low?", h.Nights, num(lo), num(hi), num(below))
			if gapLimit > 0 && !math.IsNaN(latest.minGap) && latest.minGap > gapLimit {
				f.Message += fmt.Sprintf(" (latest night: air temperature stayed %s °C above the dew point, limit %s °C)", num(latest.minGap), num(gapLimit))
			}
			return f, true
		}
	}
	if latest.maxRH >= below+driftMargin && !fails(latest) {
		f.Status = StatusGood
		f.Message = fmt.Sprintf("night to %s reached %s %% RH", latest.night, num(latest.maxRH))
	} else {
		f.Status = StatusHold
	}
	return f, true
}

// NeighbourChecks compares one station with the median of the other
// stations of its site. windows holds the window of every opted-in station of
// the site (this one included), keyed by station id.
func NeighbourChecks(site, station string, cfg *config.Alerts, windows map[string][]HourObs) []Finding {
	n := cfg.Neighbours
	own := windows[station]
	if len(own) == 0 || len(windows) < n.MinStations {
		return nil
	}
	last := own[len(own)-1]
	at := last.Start.Add(time.Hour)
	daily := map[string]map[string]map[hourly.Quantity]float64{} // station -> day -> quantity -> value
	for id, w := range windows {
		if len(w) > 0 {
			daily[id] = dailyValues(w)
		}
	}
	var out []Finding
	for _, q := range []hourly.Quantity{hourly.AirTemp, hourly.RelHumidity, hourly.Wind, hourly.Solar} {
		tol := n.Tolerance[q]
		var deps []float64
		var others int
		for _, day := range sortedDays(daily[station]) {
			v, ok := daily[station][day][q]
			if !ok {
				continue
			}
			var vals []float64
			for id, d := range daily {
				if id == station {
					continue
				}
				if x, ok := d[day][q]; ok {
					vals = append(vals, x)
				}
			}
			if len(vals)+1 < n.MinStations {
				continue
			}
			med := median(vals)
			dep := v - med
			if q == hourly.Solar {
				if med <= 0 {
					continue
				}
				dep = (v - med) / med
			}
			deps = append(deps, dep)
			others = len(vals)
		}
		if len(deps) == 0 {
			continue
		}
		f := Finding{Key: hourKey(site, station, q, alert.KindNeighbours), Severity: alert.SeverityWarning, Limit: tol, At: at, Value: deps[len(deps)-1]}
		unit := map[hourly.Quantity]string{hourly.AirTemp: " °C", hourly.RelHumidity: " %", hourly.Wind: " m/s", hourly.Solar: ""}[q]
		what := "daily mean " + string(q)
		if q == hourly.Solar {
			what = "daily solar total (fraction of the median)"
		}
		recent := deps[max(0, len(deps)-n.Days):]
		all := len(recent) == n.Days
		for _, d := range recent {
			all = all && math.Abs(d) > tol
		}
		switch {
		case all:
			parts := make([]string, len(recent))
			for i, d := range recent {
				parts[i] = fmt.Sprintf("%+.2f", d)
			}
			f.Status = StatusBad
			f.Message = fmt.Sprintf("%s departed from the median of %d other stations by %s%s over the last %d days, tolerance %s%s", what, others, strings.Join(parts, ", "), unit, n.Days, num(tol), unit)
		case math.Abs(recent[len(recent)-1]) <= tol*neighbourClearFraction:
			f.Status = StatusGood
			f.Message = fmt.Sprintf("%s within %s%s of the other stations' median", what, num(tol*neighbourClearFraction), unit)
		default:
			f.Status = StatusHold
		}
		out = append(out, f)
	}
	return out
}

// dailyValues returns, per finished local day with enough hours, the daily
// mean of air temperature, relative humidity and wind and the daily solar
// total (MJ m-2).
func dailyValues(w []HourObs) map[string]map[hourly.Quantity]float64 {
	out := map[string]map[hourly.Quantity]float64{}
	lastDay := w[len(w)-1].Local.Format(time.DateOnly)
	for _, d := range groupBy(w, func(o HourObs) string { return o.Local.Format(time.DateOnly) }) {
		if d.key == lastDay && w[len(w)-1].Local.Hour() != 23 {
			continue
		}
		vals := map[hourly.Quantity]float64{}
		for _, q := range []hourly.Quantity{hourly.AirTemp, hourly.RelHumidity, hourly.Wind, hourly.Solar} {
			var sum float64
			var n int
			for _, o := range d.hours {
				if s, ok := o.Q[q]; ok && s.N > 0 {
					sum += s.Mean
					n++
				}
			}
			if n < minDayHours {
				continue
			}
			if q == hourly.Solar {
				// Daily total from hourly means, scaled to 24 h when a few hours are missing.
				vals[q] = math.Max(sum, 0) * 0.0036 * 24 / float64(n)
			} else {
				vals[q] = sum / float64(n)
			}
		}
		out[d.key] = vals
	}
	return out
}

type group struct {
	key   string
	hours []HourObs
}

// groupBy groups consecutive hours by key, preserving order.
func groupBy(w []HourObs, key func(HourObs) string) []group {
	var out []group
	for _, o := range w {
		k := key(o)
		if len(out) == 0 || out[len(out)-1].key != k {
			out = append(out, group{key: k})
		}
		out[len(out)-1].hours = append(out[len(out)-1].hours, o)
	}
	return out
}

func sortedDays(m map[string]map[hourly.Quantity]float64) []string {
	days := make([]string, 0, len(m))
	for d := range m {
		days = append(days, d)
	}
	slices.Sort(days)
	return days
}

func median(v []float64) float64 {
	s := slices.Clone(v)
	slices.Sort(s)
	n := len(s)
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}

func meanStd(v []float64) (mean, sd float64) {
	for _, x := range v {
		mean += x
	}
	mean /= float64(len(v))
	for _, x := range v {
		sd += (x - mean) * (x - mean)
	}
	return mean, math.Sqrt(sd / float64(len(v)))
}
