package hourly

import (
	"fmt"
	"math"
)

// Pressure returns the mean atmospheric pressure in kPa at elevation z
// metres above sea level (FAO-56 eq. 7; ASCE-EWRI 2005 uses the same
// constants): P = 101.3 ((293 - 0.0065 z) / 293)^5.26.
func Pressure(z float64) float64 {
	// x^5.26 as exp(5.26 ln x): the same value to ~1e-15, at a third of the cost of math.Pow.
	return 101.3 * math.Exp(5.26*math.Log((293-0.0065*z)/293)) // FAO-56 eq. 7
}

// PsychrometricConstant returns γ in kPa/°C for pressure p in kPa
// (FAO-56 eq. 8): γ = 0.665e-3 P.
func PsychrometricConstant(p float64) float64 {
	return 0.000665 * p // FAO-56 eq. 8
}

// SatVapourPressure returns the saturation vapour pressure e°(T) in kPa over
// water at air temperature t in °C (FAO-56 eq. 11).
func SatVapourPressure(t float64) float64 {
	return 0.6108 * math.Exp(17.27*t/(t+237.3)) // FAO-56 eq. 11
}

// SatSlope returns the slope Δ of the saturation vapour pressure curve in
// kPa/°C at air temperature t in °C (FAO-56 eq. 13).
func SatSlope(t float64) float64 {
	return satSlopeFrom(t, SatVapourPressure(t))
}

// satSlopeFrom is FAO-56 eq. 13 reusing an already computed e°(t).
func satSlopeFrom(t, es float64) float64 {
	d := t + 237.3
	return 4098 * es / (d * d) // FAO-56 eq. 13
}

// VapourPressureFromRH returns the actual vapour pressure in kPa from an air
// temperature t (°C) and relative humidity rh (%) observed together
// (FAO-56 eq. 54, the hourly form): ea = e°(T) RH/100. RH within
// RHTolerance outside 0..100 is clamped; beyond it, a non-finite value or a
// temperature outside MinAirTemp..MaxAirTemp is an error wrapping ErrInput.
func VapourPressureFromRH(t, rh float64) (float64, error) {
	if err := checkTemp("air temperature", t); err != nil {
		return 0, err
	}
	if !finite(rh) || rh < -RHTolerance || rh > 100+RHTolerance {
		return 0, fmt.Errorf("relative humidity: %v %% outside 0..100: %w", rh, ErrInput)
	}
	rh = min(max(rh, 0), 100)
	return SatVapourPressure(t) * rh / 100, nil // FAO-56 eq. 54
}

// VapourPressureFromDewPoint returns the actual vapour pressure in kPa from
// the dew point td in °C (FAO-56 eq. 14): ea = e°(Tdew). A dew point that is
// not finite or outside MinAirTemp..MaxAirTemp is an error wrapping ErrInput.
func VapourPressureFromDewPoint(td float64) (float64, error) {
	if err := checkTemp("dew point", td); err != nil {
		return 0, err
	}
	return SatVapourPressure(td), nil // FAO-56 eq. 14
}

// checkTemp validates a temperature in °C.
func checkTemp(name string, t float64) error {
	if !finite(t) || t < MinAirTemp || t > MaxAirTemp {
		return fmt.Errorf("%s: %v degC outside %g..%g: %w", name, t, MinAirTemp, MaxAirTemp, ErrInput)
	}
	return nil
}

// DewPointFromVapourPressure returns the dew point in °C for an actual
// vapour pressure ea in kPa, the inverse of FAO-56 eq. 11/14. It returns
// NaN for ea <= 0, which has no dew point.
func DewPointFromVapourPressure(ea float64) float64 {
	if ea <= 0 {
		return math.NaN()
	}
	l := math.Log(ea / 0.6108)
	return 237.3 * l / (17.27 - l) // FAO-56 eq. 11 solved for T
}

// MeanSatVapourPressure returns the daily saturation vapour pressure in kPa
// as the mean of e° at tmax and tmin (FAO-56 eq. 12).
func MeanSatVapourPressure(tmax, tmin float64) float64 {
	return (SatVapourPressure(tmax) + SatVapourPressure(tmin)) / 2 // FAO-56 eq. 12
}

// VapourPressureFromRHMaxMin returns the daily actual vapour pressure in kPa
// from tmax/tmin (°C) and the day's RHmax/RHmin (%) (FAO-56 eq. 17).
func VapourPressureFromRHMaxMin(tmax, tmin, rhmax, rhmin float64) float64 {
	return (SatVapourPressure(tmin)*rhmax/100 + SatVapourPressure(tmax)*rhmin/100) / 2 // FAO-56 eq. 17
}

// VapourPressureFromRHMean returns the daily actual vapour pressure in kPa
// from tmax/tmin (°C) and the day's mean RH (%) (FAO-56 eq. 19).
func VapourPressureFromRHMean(tmax, tmin, rhmean float64) float64 {
	return rhmean / 100 * MeanSatVapourPressure(tmax, tmin) // FAO-56 eq. 19
}
