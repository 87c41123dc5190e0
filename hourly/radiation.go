package hourly

import (
	"math"
	"time"
)

// Radiation constants.
const (
	// SolarConstant is Gsc in MJ m-2 min-1 (FAO-56 eq. 21/28).
	SolarConstant = 0.0820
	// Albedo of the grass/alfalfa reference surface (FAO-56 eq. 38,
	// ASCE-EWRI 2005).
	Albedo = 0.23
	// SigmaHourASCE is the Stefan-Boltzmann constant per hour used by
	// ASCE-EWRI 2005 eq. 44, MJ K-4 m-2 h-1.
	SigmaHourASCE = 2.042e-10
	// SigmaDayASCE is the daily Stefan-Boltzmann constant of ASCE-EWRI 2005
	// eq. 39, MJ K-4 m-2 d-1.
	SigmaDayASCE = 4.901e-9
	// SigmaDayFAO is the daily Stefan-Boltzmann constant of FAO-56 eq. 39,
	// MJ K-4 m-2 d-1; FAO-56 uses SigmaDayFAO/24 for hourly periods.
	SigmaDayFAO = 4.903e-9
	// KelvinLongwave is the Kelvin offset of the long-wave terms (FAO-56
	// eq. 39, ASCE-EWRI 2005 eq. 44). The aerodynamic term uses 273.
	KelvinLongwave = 273.16
	// HighSunElevation is the sun elevation (rad) above which the hourly
	// cloudiness function is computed from Rs/Rso; below it the value of the
	// last such hour is carried (ASCE-EWRI 2005, notes to eq. 45).
	HighSunElevation = 0.3
	// DefaultNightRsRso is the Rs/Rso assumed for the cloudiness function
	// when no carried value exists: FAO-56 Example 19 assumes 0.8 for its
	// night hour (FAO-56 ch. 3 suggests about 0.7-0.8 in arid and
	// semi-arid and 0.4-0.6 in humid climates; from memory).
	DefaultNightRsRso = 0.8
)

// InverseRelativeDistance returns dr, the inverse relative Earth-Sun
// distance on day of year doy (FAO-56 eq. 23).
func InverseRelativeDistance(doy int) float64 {
	return 1 + 0.033*math.Cos(2*math.Pi/365*float64(doy)) // FAO-56 eq. 23
}

// SolarDeclination returns δ in rad on day of year doy (FAO-56 eq. 24).
func SolarDeclination(doy int) float64 {
	return 0.409 * math.Sin(2*math.Pi/365*float64(doy)-1.39) // FAO-56 eq. 24
}

// SeasonalCorrection returns Sc, the seasonal correction for solar time in
// hours on day of year doy (FAO-56 eq. 32/33).
func SeasonalCorrection(doy int) float64 {
	b := 2 * math.Pi * float64(doy-81) / 364                             // FAO-56 eq. 33
	return 0.1645*math.Sin(2*b) - 0.1255*math.Cos(b) - 0.025*math.Sin(b) // FAO-56 eq. 32
}

// SunsetHourAngle returns ωs in rad for latitude lat (rad) and declination
// decl (rad) (FAO-56 eq. 25). Polar night gives 0 and polar day π, where the
// equation itself is undefined.
func SunsetHourAngle(lat, decl float64) float64 {
	return sunsetFrom(-math.Tan(lat) * math.Tan(decl)) // FAO-56 eq. 25
}

// DailyRa returns the daily extraterrestrial radiation in MJ m-2 d-1 at
// latitude latDeg (degrees, north positive) on day of year doy (FAO-56
// eq. 21).
func DailyRa(latDeg float64, doy int) float64 {
	lat := latDeg * math.Pi / 180 // FAO-56 eq. 22
	decl := SolarDeclination(doy)
	ws := SunsetHourAngle(lat, decl)
	ra := 24 * 60 / math.Pi * SolarConstant * InverseRelativeDistance(doy) *
		(ws*math.Sin(lat)*math.Sin(decl) + math.Cos(lat)*math.Cos(decl)*math.Sin(ws)) // FAO-56 eq. 21
	return max(ra, 0)
}

// DaylightHours returns the maximum possible sunshine duration N in hours at
// latitude latDeg (degrees) on day of year doy (FAO-56 eq. 34).
func DaylightHours(latDeg float64, doy int) float64 {
	return 24 / math.Pi * SunsetHourAngle(latDeg*math.Pi/180, SolarDeclination(doy)) // FAO-56 eq. 34
}

// SolarPeriod describes the sun during one period at one station.
type SolarPeriod struct {
	DayOfYear   int     // J of the period mid-point in station standard time
	MidHour     float64 // standard clock time of the mid-point, hours (t of FAO-56 eq. 31)
	Hours       float64 // period length t1, hours
	Dr          float64 // inverse relative Earth-Sun distance (FAO-56 eq. 23)
	Declination float64 // δ, rad (FAO-56 eq. 24)
	Sc          float64 // seasonal correction for solar time, hours (FAO-56 eq. 32)
	Omega       float64 // solar time angle at the mid-point, rad, in [-π, π) (FAO-56 eq. 31)
	Omega1      float64 // solar time angle at the start, rad, after clipping to ±ωs
	Omega2      float64 // solar time angle at the end, rad, after clipping to ±ωs
	OmegaS      float64 // sunset hour angle, rad (FAO-56 eq. 25)
	SinBeta     float64 // sine of the sun elevation at the mid-point
	Elevation   float64 // sun elevation β at the mid-point, rad (ASCE-EWRI 2005 eq. 62)
	Ra          float64 // extraterrestrial radiation, MJ m-2 per period (FAO-56 eq. 28)
}

// SunForPeriod computes the solar geometry and extraterrestrial radiation of
// the period [start, start+length) at station st. A zero length means one
// hour. The station's UTCOffset gives its standard meridian
// (Lz = -15 x UTCOffset degrees west) and its east-positive Longitude gives
// Lm = -Longitude degrees west (FAO-56 eq. 31). The caller validates the
// station; SunForPeriod does not.
func SunForPeriod(st Station, start time.Time, length time.Duration) SolarPeriod {
	sp := sunForPeriod(st, start, length)
	if sp.OmegaS < 0 {
		lat := st.Latitude * math.Pi / 180
		sp.OmegaS = sunsetFrom(-math.Tan(lat) * math.Tan(sp.Declination)) // FAO-56 eq. 25
	}
	return sp
}

// sunForPeriod is SunForPeriod leaving OmegaS at -1 unless the period needs
// clipping at sunrise or sunset, which saves an arccos for most hours.
func sunForPeriod(st Station, start time.Time, length time.Duration) SolarPeriod {
	if length <= 0 {
		length = time.Hour
	}
	var sp SolarPeriod
	sp.Hours = length.Hours()

	// Mid-point in station standard time, as seconds since the Unix epoch.
	offset := int64(math.Round(st.UTCOffset * 3600))
	mid := start.Add(length / 2)
	secs := mid.Unix() + offset
	day := secs / 86400
	rem := secs - day*86400
	if rem < 0 {
		rem += 86400
		day--
	}
	sp.MidHour = (float64(rem) + float64(mid.Nanosecond())/1e9) / 3600
	sp.DayOfYear = dayOfYear(day)

	dc := &dayTable[sp.DayOfYear]
	sp.Dr, sp.Declination, sp.Sc = dc.dr, dc.decl, dc.sc

	lat := st.Latitude * math.Pi / 180                                      // FAO-56 eq. 22
	w := math.Pi / 12 * ((sp.MidHour + 0.06667*lzMinusLm(st) + sp.Sc) - 12) // FAO-56 eq. 31
	if w < -math.Pi || w >= math.Pi {
		w = math.Mod(w+math.Pi, 2*math.Pi)
		if w < 0 {
			w += 2 * math.Pi
		}
		w -= math.Pi
	}
	sp.Omega = w
	half := math.Pi * sp.Hours / 24
	w1 := w - half // FAO-56 eq. 29
	w2 := w + half // FAO-56 eq. 30

	sinLat, cosLat := math.Sincos(lat)
	sinDec, cosDec := dc.sinDecl, dc.cosDecl
	x := -(sinLat / cosLat) * (sinDec / cosDec) // cos ωs, FAO-56 eq. 25
	sp.OmegaS = -1

	// sin and cos of ω, ω1, ω2 from one Sincos by the angle-sum identities.
	sinW, cosW := math.Sincos(w)
	sinH, cosH := sinHourHalf, cosHourHalf
	if sp.Hours != 1 {
		sinH, cosH = math.Sincos(half)
	}
	sin1 := sinW*cosH - cosW*sinH
	sin2 := sinW*cosH + cosW*sinH
	cos1 := cosW*cosH + sinW*sinH
	cos2 := cosW*cosH - sinW*sinH
	// For |ω| <= π, |ω| > ωs exactly when cos ω < cos ωs; the ends may lie
	// beyond ±π, which is always past sunset unless the sun never sets.
	beyond := func(wi, ci float64) bool { return math.Abs(wi) > math.Pi || ci < x }
	if x > -1 && (beyond(w1, cos1) || beyond(w2, cos2)) {
		ws := sunsetFrom(x)
		sp.OmegaS = ws
		// ASCE-EWRI 2005 limits of ω1/ω2 (eq. 56, number from memory): keep
		// the integration between sunrise and sunset.
		sinWs := math.Sin(ws)
		if w1 < -ws {
			w1, sin1 = -ws, -sinWs
		} else if w1 > ws {
			w1, sin1 = ws, sinWs
		}
		if w2 > ws {
			w2, sin2 = ws, sinWs
		} else if w2 < -ws {
			w2, sin2 = -ws, -sinWs
		}
		if w1 > w2 {
			w1, sin1 = w2, sin2
		}
	}
	sp.Omega1, sp.Omega2 = w1, w2

	sp.SinBeta = sinLat*sinDec + cosLat*cosDec*cosW
	sp.Elevation = math.Asin(max(-1, min(1, sp.SinBeta))) // ASCE-EWRI 2005 eq. 62

	if w2 > w1 {
		ra := 12 * 60 / math.Pi * SolarConstant * sp.Dr *
			((w2-w1)*sinLat*sinDec + cosLat*cosDec*(sin2-sin1)) // FAO-56 eq. 28
		sp.Ra = max(ra, 0)
	}
	return sp
}

// lzMinusLm returns Lz - Lm of FAO-56 eq. 31 in degrees west, wrapped to
// [-180, 180): the zone meridian of the station's standard time (15° per
// hour of UTC offset) less the station's longitude. Near the date line the
// plain difference can exceed 180° (e.g. 171.8° W with UTC+13 gives
// -366.8°); the factor 0.06667 h/degree is not exactly 1/15, so an unwrapped
// difference would shift solar time by 0.0012 h per 360°.
func lzMinusLm(st Station) float64 {
	d := st.Longitude - 15*st.UTCOffset
	if d >= -180 && d < 180 {
		return d
	}
	d = math.Mod(d+180, 360)
	if d < 0 {
		d += 360
	}
	return d - 180
}

// sin and cos of half an hour's solar time angle, π/24.
var sinHourHalf, cosHourHalf = math.Sincos(math.Pi / 24)

// dayConstants holds the day-of-year terms of the hourly geometry.
type dayConstants struct {
	dr, decl, sinDecl, cosDecl, sc float64
}

// dayTable holds dayConstants for J = 1..366 (index 0 unused), computed once
// from the published equations so that Compute spends no time on them.
var dayTable = func() (t [367]dayConstants) {
	for j := 1; j <= 366; j++ {
		d := SolarDeclination(j)
		s, c := math.Sincos(d)
		t[j] = dayConstants{dr: InverseRelativeDistance(j), decl: d, sinDecl: s, cosDecl: c, sc: SeasonalCorrection(j)}
	}
	return t
}()

// sunsetFrom returns ωs = arccos(x) with x = -tan φ tan δ (FAO-56 eq. 25),
// 0 for polar night (x >= 1) and π for polar day (x <= -1).
func sunsetFrom(x float64) float64 {
	switch {
	case x >= 1:
		return 0
	case x <= -1:
		return math.Pi
	case x != x: // NaN: latitude exactly ±90 at an equinox; the sun grazes the horizon
		return math.Pi / 2
	}
	return math.Acos(x)
}

// dayOfYear returns the day of year (1-366) of the day that is days days
// after 1970-01-01 (civil calendar arithmetic, proleptic Gregorian).
func dayOfYear(days int64) int {
	z := days + 719468
	era := z / 146097
	if z < 0 && z%146097 != 0 {
		era--
	}
	doe := z - era*146097                                  // [0, 146096]
	yoe := (doe - doe/1460 + doe/36524 - doe/146096) / 365 // [0, 399]
	doyMar := doe - (365*yoe + yoe/4 - yoe/100)            // day of the year starting 1 March, [0, 365]
	y := yoe + era*400
	if doyMar >= 306 { // January or February: day of the next civil year, leap day not yet passed
		return int(doyMar-306) + 1
	}
	leap := y%4 == 0 && (y%100 != 0 || y%400 == 0)
	d := int(doyMar) + 31 + 28 + 1 // 1 March is day 60 in a common year
	if leap {
		d++
	}
	return d
}

// RsoSimple returns clear-sky radiation from Ra and the station elevation z
// in m (FAO-56 eq. 37, ASCE-EWRI 2005 eq. 47): Rso = (0.75 + 2e-5 z) Ra.
func RsoSimple(ra, z float64) float64 {
	return (0.75 + 2e-5*z) * ra // FAO-56 eq. 37
}

// minSinBeta bounds sin β in the Appendix D beam index so that the hour
// around sunrise/sunset, whose mid-point may be below the horizon while Ra is
// not zero, stays finite (common practice, no source).
const minSinBeta = 0.01

// RsoFull returns clear-sky radiation by ASCE-EWRI 2005 Appendix D
// (equation numbers and constants from memory): Rso = (KB + KD) Ra (D.1),
// KB = 0.98 exp(-0.00146 P / (Kt sinβ) - 0.075 (W / sinβ)^0.4) (D.2),
// W = 0.14 ea P + 2.1 mm of precipitable water (D.3), KD = 0.35 - 0.36 KB
// for KB >= 0.15 and 0.18 + 0.82 KB otherwise (D.4). ra is in any energy
// unit (Rso comes out in the same), p in kPa, ea in kPa, sinBeta the sine
// of the sun elevation (hourly: at mid-period, ASCE eq. 62; daily: D.5),
// kt the turbidity coefficient (1 clean air, 0.5 extremely turbid; zero
// means 1).
func RsoFull(ra, p, ea, sinBeta, kt float64) float64 {
	if ra <= 0 {
		return 0
	}
	if kt <= 0 {
		kt = 1
	}
	sb := max(sinBeta, minSinBeta)
	w := 0.14*ea*p + 2.1                                                // ASCE-EWRI 2005 eq. D.3
	kb := 0.98 * math.Exp(-0.00146*p/(kt*sb)-0.075*math.Pow(w/sb, 0.4)) // ASCE-EWRI 2005 eq. D.2
	var kd float64
	if kb >= 0.15 {
		kd = 0.35 - 0.36*kb // ASCE-EWRI 2005 eq. D.4
	} else {
		kd = 0.18 + 0.82*kb // ASCE-EWRI 2005 eq. D.4
	}
	return (kb + kd) * ra // ASCE-EWRI 2005 eq. D.1
}

// DailySinBeta returns sin φ24, the daily mean of the sine of the sun angle
// weighted by Ra, for Appendix D daily clear-sky radiation (ASCE-EWRI 2005
// eq. D.5, from memory): sin(0.85 + 0.3 φ sin(2πJ/365 - 1.39) - 0.42 φ²).
func DailySinBeta(latDeg float64, doy int) float64 {
	lat := latDeg * math.Pi / 180
	return math.Sin(0.85 + 0.3*lat*math.Sin(2*math.Pi/365*float64(doy)-1.39) - 0.42*lat*lat) // ASCE-EWRI 2005 eq. D.5
}

// NetShortwave returns Rns = (1 - 0.23) Rs (FAO-56 eq. 38).
func NetShortwave(rs float64) float64 {
	return (1 - Albedo) * rs // FAO-56 eq. 38
}

// ClampRsRso limits relative shortwave radiation to 0.3..1.0 (ASCE-EWRI
// 2005, limits of eq. 45).
func ClampRsRso(r float64) float64 {
	return min(max(r, 0.3), 1.0)
}

// CloudFactor returns the cloudiness function fcd = 1.35 Rs/Rso - 0.35 with
// Rs/Rso first limited to 0.3..1.0 (ASCE-EWRI 2005 eq. 45; FAO-56 eq. 39
// factor), so fcd stays in 0.055..1.0.
func CloudFactor(rsRso float64) float64 {
	return 1.35*ClampRsRso(rsRso) - 0.35 // ASCE-EWRI 2005 eq. 45
}

// NetLongwave returns the net outgoing long-wave radiation in MJ m-2 per
// period (ASCE-EWRI 2005 eq. 44; FAO-56 eq. 39 with an hourly σ):
// Rnl = σ fcd (0.34 - 0.14 √ea) (T + 273.16)^4, with sigma already scaled to
// the period (e.g. SigmaHourASCE x hours), t in °C and ea in kPa.
func NetLongwave(sigma, t, ea, fcd float64) float64 {
	k := t + KelvinLongwave
	k2 := k * k
	return sigma * fcd * (0.34 - 0.14*math.Sqrt(ea)) * k2 * k2 // ASCE-EWRI 2005 eq. 44
}

// HargreavesSolar estimates solar radiation from the temperature range
// (FAO-56 eq. 50): Rs = kRs √(Tmax - Tmin) Ra. ra is the extraterrestrial
// radiation of the period being estimated (an hour's Ra gives an hour's
// Rs), tmax/tmin the extremes of the surrounding 24 h in °C, krs the
// adjustment coefficient (0.16 interior, 0.19 coastal; FAO-56 eq. 50 notes).
// A range below zero counts as zero. The Rs returned is not limited to Rso;
// CapAtClearSky (or Hour.SolarEstimated in Compute) limits it.
func HargreavesSolar(ra, tmax, tmin, krs float64) float64 {
	d := tmax - tmin
	if !(d > 0) || !(ra > 0) {
		return 0
	}
	return krs * math.Sqrt(d) * ra // FAO-56 eq. 50
}

// CapAtClearSky limits an estimated solar radiation rs to the clear-sky
// radiation rso and reports whether it did: Rs cannot exceed Rso (FAO-56
// eq. 39 limits Rs/Rso to 1.0). The Hargreaves-Samani estimate (eq. 50)
// exceeds Rso whenever kRs √ΔT > 0.75 + 2e-5 z, e.g. a 22 °C range with
// kRs 0.16.
func CapAtClearSky(rs, rso float64) (float64, bool) {
	if rs > rso {
		return rso, true
	}
	return rs, false
}

// SunshineSolar returns Rs from the sunshine duration n (hours), the
// daylight hours N and Ra, with the Angstrom values as = 0.25 and bs = 0.50
// recommended when no calibration exists (FAO-56 eq. 35).
func SunshineSolar(n, daylight, ra float64) float64 {
	if daylight <= 0 {
		return 0.25 * ra
	}
	return (0.25 + 0.50*n/daylight) * ra // FAO-56 eq. 35
}
