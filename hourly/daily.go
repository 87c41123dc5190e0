package hourly

import (
	"fmt"
	"math"
	"time"
)

// DailyHumidity selects how Daily obtains the day's actual vapour pressure.
type DailyHumidity string

// The daily humidity sources.
const (
	// HumidityEa: DayWeather.Ea holds ea in kPa.
	HumidityEa DailyHumidity = "ea"
	// HumidityDewPoint: ea = e°(DayWeather.DewPoint) (FAO-56 eq. 14).
	HumidityDewPoint DailyHumidity = "dew_point"
	// HumidityRHMaxMin: ea from RHMax and RHMin (FAO-56 eq. 17).
	HumidityRHMaxMin DailyHumidity = "rh_max_min"
	// HumidityRHMean: ea from RHMean (FAO-56 eq. 19).
	HumidityRHMean DailyHumidity = "rh_mean"
)

// DayWeather is one day (or a month's average day) of weather for Daily.
type DayWeather struct {
	// Date is the day; its calendar year, month and day give J.
	Date time.Time
	// TMax and TMin are the day's extreme air temperatures, °C.
	TMax, TMin float64
	// Humidity selects which of the fields below gives ea.
	Humidity     DailyHumidity
	Ea           float64 // kPa
	DewPoint     float64 // °C
	RHMax, RHMin float64 // %
	RHMean       float64 // %
	// Wind2 is the mean wind speed at 2 m, m/s.
	Wind2 float64
	// Solar is Rs, MJ m-2 d-1.
	Solar float64
	// SoilHeat is G, MJ m-2 d-1: about zero for a single day (FAO-56 eq. 42),
	// SoilHeatMonthly for monthly means.
	SoilHeat float64
}

// DailyResult is the daily reference ET with its intermediates.
type DailyResult struct {
	Reference     Reference
	DayOfYear     int
	TMean         float64 // (Tmax + Tmin)/2, °C (FAO-56 eq. 9)
	Pressure      float64 // kPa
	Gamma         float64 // kPa/°C
	Delta         float64 // kPa/°C at TMean
	Es            float64 // mean of e°(Tmax) and e°(Tmin), kPa (FAO-56 eq. 12)
	Ea            float64 // kPa
	VPD           float64 // kPa
	Ra            float64 // MJ m-2 d-1 (FAO-56 eq. 21)
	DaylightHours float64 // N, h (FAO-56 eq. 34)
	Rso           float64 // MJ m-2 d-1
	RsRso         float64 // limited to 0.3..1.0
	Fcd           float64
	Rns           float64 // MJ m-2 d-1
	Rnl           float64 // MJ m-2 d-1 (FAO-56 eq. 39)
	Rn            float64 // MJ m-2 d-1
	G             float64 // MJ m-2 d-1
	Cn, Cd        float64

	RadiationTerm   float64 // mm/d
	AerodynamicTerm float64 // mm/d
	ET              float64 // mm/d
}

// dailyConstants returns Cn, Cd and the daily σ of a reference
// (ASCE-EWRI 2005 Table 1; FAO-56 eq. 6 and 39).
func dailyConstants(ref Reference) (cn, cd, sigma float64, ok bool) {
	switch ref {
	case Short:
		return 900, 0.34, SigmaDayASCE, true
	case Tall:
		return 1600, 0.38, SigmaDayASCE, true
	case FAO56:
		return 900, 0.34, SigmaDayFAO, true
	}
	return 0, 0, 0, false
}

// SoilHeatMonthly returns the soil heat flux of a month, MJ m-2 d-1, from
// the mean air temperatures of the previous and next months (FAO-56 eq. 43).
func SoilHeatMonthly(tPrev, tNext float64) float64 {
	return 0.07 * (tNext - tPrev) // FAO-56 eq. 43
}

// SoilHeatMonthlyNoNext returns the soil heat flux of a month, MJ m-2 d-1,
// from the mean air temperatures of the previous and the current month,
// when the next month is not known (FAO-56 eq. 44).
func SoilHeatMonthlyNoNext(tPrev, tCur float64) float64 {
	return 0.14 * (tCur - tPrev) // FAO-56 eq. 44
}

// Daily returns the daily reference ET (FAO-56 eq. 6 for FAO56 and Short,
// ASCE-EWRI 2005 eq. 1 with the daily Table 1 constants Cn 900/1600, Cd
// 0.34/0.38 for Short/Tall) with its intermediates. Net long-wave radiation
// uses the mean of Tmax^4 and Tmin^4 (FAO-56 eq. 39); Rso follows the
// station's ClearSky form (Appendix D with sin φ24, eq. D.5, for Full).
// Bad weather values wrap ErrInput, a bad station or reference ErrConfig.
func Daily(st Station, ref Reference, d DayWeather) (DailyResult, error) {
	var r DailyResult
	cn, cd, sigma, ok := dailyConstants(ref)
	if !ok {
		return r, fmt.Errorf("daily: reference %q is not one of short, tall, fao56: %w", ref, ErrConfig)
	}
	if err := st.Validate(); err != nil {
		return r, fmt.Errorf("daily: %w", err)
	}
	if err := checkTemp("maximum air temperature", d.TMax); err != nil {
		return r, fmt.Errorf("daily: %w", err)
	}
	if err := checkTemp("minimum air temperature", d.TMin); err != nil {
		return r, fmt.Errorf("daily: %w", err)
	}
	if d.TMin > d.TMax {
		return r, fmt.Errorf("daily: minimum air temperature %v degC above maximum %v degC: %w", d.TMin, d.TMax, ErrInput)
	}
	if !finite(d.Wind2) || d.Wind2 < 0 || d.Wind2 > MaxWind {
		return r, fmt.Errorf("daily: wind speed at 2 m: %v m/s outside 0..%g: %w", d.Wind2, MaxWind, ErrInput)
	}
	if !finite(d.Solar) || d.Solar < 0 || d.Solar > 50 {
		return r, fmt.Errorf("daily: solar radiation: %v MJ/m2/d outside 0..50: %w", d.Solar, ErrInput)
	}
	if !finite(d.SoilHeat) || math.Abs(d.SoilHeat) > 20 {
		return r, fmt.Errorf("daily: soil heat flux: %v MJ/m2/d outside -20..20: %w", d.SoilHeat, ErrInput)
	}

	r.Reference = ref
	r.Cn, r.Cd = cn, cd
	r.DayOfYear = d.Date.YearDay()
	r.TMean = (d.TMax + d.TMin) / 2 // FAO-56 eq. 9
	r.Pressure = st.pressure()      // FAO-56 eq. 7 unless given
	r.Gamma = PsychrometricConstant(r.Pressure)
	r.Delta = SatSlope(r.TMean)                  // FAO-56 eq. 13 at Tmean
	r.Es = MeanSatVapourPressure(d.TMax, d.TMin) // FAO-56 eq. 12

	checkRH := func(name string, v float64) (float64, error) {
		if !finite(v) || v < -RHTolerance || v > 100+RHTolerance {
			return 0, fmt.Errorf("daily: %s: %v %% outside 0..100: %w", name, v, ErrInput)
		}
		return min(max(v, 0), 100), nil
	}
	switch d.Humidity {
	case HumidityEa:
		if !finite(d.Ea) || d.Ea < 0 {
			return DailyResult{}, fmt.Errorf("daily: actual vapour pressure: %v kPa must be >= 0: %w", d.Ea, ErrInput)
		}
		r.Ea = d.Ea
	case HumidityDewPoint:
		if err := checkTemp("dew point", d.DewPoint); err != nil {
			return DailyResult{}, fmt.Errorf("daily: %w", err)
		}
		r.Ea = SatVapourPressure(d.DewPoint) // FAO-56 eq. 14
	case HumidityRHMaxMin:
		hi, err := checkRH("maximum relative humidity", d.RHMax)
		if err != nil {
			return DailyResult{}, err
		}
		lo, err := checkRH("minimum relative humidity", d.RHMin)
		if err != nil {
			return DailyResult{}, err
		}
		r.Ea = VapourPressureFromRHMaxMin(d.TMax, d.TMin, hi, lo) // FAO-56 eq. 17
	case HumidityRHMean:
		m, err := checkRH("mean relative humidity", d.RHMean)
		if err != nil {
			return DailyResult{}, err
		}
		r.Ea = VapourPressureFromRHMean(d.TMax, d.TMin, m) // FAO-56 eq. 19
	default:
		return DailyResult{}, fmt.Errorf("daily: humidity source %q is not one of ea, dew_point, rh_max_min, rh_mean: %w", d.Humidity, ErrInput)
	}
	if r.Ea > r.Es {
		if r.Ea > r.Es*(1+EaTolerance) {
			return DailyResult{}, fmt.Errorf("daily: actual vapour pressure: %.4g kPa exceeds saturation %.4g kPa: %w", r.Ea, r.Es, ErrInput)
		}
		r.Ea = r.Es
	}
	r.VPD = r.Es - r.Ea

	r.Ra = DailyRa(st.Latitude, r.DayOfYear)                  // FAO-56 eq. 21
	r.DaylightHours = DaylightHours(st.Latitude, r.DayOfYear) // FAO-56 eq. 34
	if st.ClearSky == ClearSkyFull {
		r.Rso = RsoFull(r.Ra, r.Pressure, r.Ea, DailySinBeta(st.Latitude, r.DayOfYear), st.Turbidity) // ASCE-EWRI 2005 eq. D.1
	} else {
		r.Rso = RsoSimple(r.Ra, st.Elevation) // FAO-56 eq. 37
	}
	r.RsRso = 1
	if r.Rso > 0 {
		r.RsRso = ClampRsRso(d.Solar / r.Rso)
	}
	r.Fcd = CloudFactor(r.RsRso)
	r.Rns = NetShortwave(d.Solar)                                // FAO-56 eq. 38
	r.Rnl = NetLongwaveDaily(sigma, d.TMax, d.TMin, r.Ea, r.Fcd) // FAO-56 eq. 39
	r.Rn = r.Rns - r.Rnl                                         // FAO-56 eq. 40
	r.G = d.SoilHeat

	den := r.Delta + r.Gamma*(1+cd*d.Wind2)
	r.RadiationTerm = 0.408 * r.Delta * (r.Rn - r.G) / den                     // FAO-56 eq. 6
	r.AerodynamicTerm = r.Gamma * cn / (r.TMean + 273) * d.Wind2 * r.VPD / den // FAO-56 eq. 6
	r.ET = r.RadiationTerm + r.AerodynamicTerm
	return r, nil
}

// NetLongwaveDaily returns the daily net outgoing long-wave radiation in
// MJ m-2 d-1 (FAO-56 eq. 39; ASCE-EWRI 2005 has the same form): Rnl = σ (Tmax,K^4 +
// Tmin,K^4)/2 (0.34 - 0.14 √ea) fcd, with sigma the daily constant
// (SigmaDayFAO or SigmaDayASCE), temperatures in °C and ea in kPa.
func NetLongwaveDaily(sigma, tmax, tmin, ea, fcd float64) float64 {
	kmax, kmin := tmax+KelvinLongwave, tmin+KelvinLongwave
	k4 := (kmax*kmax*kmax*kmax + kmin*kmin*kmin*kmin) / 2
	return sigma * k4 * (0.34 - 0.14*math.Sqrt(ea)) * fcd // FAO-56 eq. 39
}
