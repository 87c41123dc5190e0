package hourly

import (
	"errors"
	"fmt"
	"math"
	"time"
)

// ErrConfig is wrapped by every error about a bad station description or
// reference, as opposed to bad weather data (ErrInput).
var ErrConfig = errors.New("bad configuration")

// Tolerances of input validation.
const (
	// RHTolerance is how far (in % RH) a relative humidity may lie outside
	// 0..100 and still be accepted, clamped to the range (capacitive sensors
	// read a few % above 100 in fog; common practice, no source).
	RHTolerance = 3.0
	// EaTolerance is the relative amount by which ea may exceed e°(T) and
	// still be accepted, clamped to e°(T). Averaging per-sample ea over an
	// hour with changing temperature lands slightly above e° of the mean
	// temperature at saturation (common practice, no source).
	EaTolerance = 0.03
	// SolarTolerance is the mean flux in W m-2 by which solar radiation may
	// be negative (pyranometer night offsets) and still be accepted, counted
	// as zero (common practice, no source).
	SolarTolerance = 10.0
	// MinAirTemp and MaxAirTemp bound a plausible air temperature, °C
	// (beyond the recorded extremes of about -89 and +57; from memory).
	MinAirTemp = -90.0
	MaxAirTemp = 65.0
	// MaxWind bounds a plausible hourly mean wind speed at 2 m, m/s.
	MaxWind = 100.0
	// MaxSolar bounds a plausible mean solar flux, W m-2 (the solar
	// constant is about 1367 W m-2; common practice, no source).
	MaxSolar = 1600.0
	// MaxFlux bounds the magnitude of a measured net radiation or soil heat
	// flux mean, W m-2 (common practice, no source).
	MaxFlux = 1500.0
	// MinPressure and MaxPressure bound a given station pressure, kPa
	// (FAO-56 eq. 7 gives about 31 kPa at 9000 m and 107 kPa at -500 m).
	MinPressure = 30.0
	MaxPressure = 110.0
	// MaxMinWind2 bounds Station.MinWind2, m/s (a floor above a light
	// breeze would no longer be a floor; common practice, no source).
	MaxMinWind2 = 2.0
	// MinAeroResistance and MaxAeroResistance bound a fixed aerodynamic
	// resistance, s/m: 208/ra is then between about 0.1 and 2 m/s of
	// equivalent wind (common practice, no source).
	MinAeroResistance = 100.0
	MaxAeroResistance = 2000.0
)

// constants of one reference surface for hourly periods.
type refConstants struct {
	cnDay, cdDay     float64 // ASCE-EWRI 2005 Table 1
	cnNight, cdNight float64
	gDay, gNight     float64 // G/Rn ratios, FAO-56 eq. 45/46; ASCE-EWRI 2005 eq. 65/66 (numbers from memory)
	sigmaHour        float64 // Stefan-Boltzmann constant per hour
}

func hourlyConstants(ref Reference) (refConstants, bool) {
	switch ref {
	case Short: // ASCE-EWRI 2005 Table 1, hourly short reference
		return refConstants{37, 0.24, 37, 0.96, 0.1, 0.5, SigmaHourASCE}, true
	case Tall: // ASCE-EWRI 2005 Table 1, hourly tall reference
		return refConstants{66, 0.25, 66, 1.7, 0.04, 0.2, SigmaHourASCE}, true
	case FAO56: // FAO-56 eq. 53 (rs = 70 s/m at all hours), G by FAO-56 eq. 45/46
		return refConstants{37, 0.34, 37, 0.34, 0.1, 0.5, SigmaDayFAO / 24}, true
	}
	return refConstants{}, false
}

// References lists the supported references in a stable order.
var References = []Reference{Short, Tall, FAO56}

// ParseReference returns the Reference named s ("short", "tall", "fao56").
func ParseReference(s string) (Reference, error) {
	r := Reference(s)
	if _, ok := hourlyConstants(r); !ok {
		return "", fmt.Errorf("parse reference: %q is not one of short, tall, fao56: %w", s, ErrConfig)
	}
	return r, nil
}

// ParseClearSky returns the ClearSky form named s ("simple", "full"; "" is simple).
func ParseClearSky(s string) (ClearSky, error) {
	switch ClearSky(s) {
	case "", ClearSkySimple:
		return ClearSkySimple, nil
	case ClearSkyFull:
		return ClearSkyFull, nil
	}
	return "", fmt.Errorf("parse clear-sky form: %q is not one of simple, full: %w", s, ErrConfig)
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// within reports whether v lies in lo..hi (NaN does not).
func within(v, lo, hi float64) bool { return v >= lo && v <= hi }

// Validate checks a station description: finite latitude, longitude,
// elevation and UTC offset within their bounds (MinLatitude..MaxLatitude
// and so on), a known clear-sky form, turbidity 0 (default) or
// MinTurbidity..MaxTurbidity, night Rs/Rso 0 or 0.3..1, a given pressure 0
// or MinPressure..MaxPressure, a minimum wind 0..MaxMinWind2 and an
// aerodynamic resistance 0 or MinAeroResistance..MaxAeroResistance. Errors
// wrap ErrConfig.
func (st Station) Validate() error {
	switch {
	case !within(st.Latitude, MinLatitude, MaxLatitude):
		return fmt.Errorf("station latitude: %v degrees outside %g..%g: %w", st.Latitude, MinLatitude, MaxLatitude, ErrConfig)
	case !within(st.Longitude, MinLongitude, MaxLongitude):
		return fmt.Errorf("station longitude: %v degrees outside %g..%g (east positive): %w", st.Longitude, MinLongitude, MaxLongitude, ErrConfig)
	case !within(st.Elevation, MinElevation, MaxElevation):
		return fmt.Errorf("station elevation: %v m outside %g..%g: %w", st.Elevation, MinElevation, MaxElevation, ErrConfig)
	case !within(st.UTCOffset, MinUTCOffset, MaxUTCOffset):
		return fmt.Errorf("station utc offset: %v h outside %g..%g: %w", st.UTCOffset, MinUTCOffset, MaxUTCOffset, ErrConfig)
	case st.ClearSky != "" && st.ClearSky != ClearSkySimple && st.ClearSky != ClearSkyFull:
		return fmt.Errorf("station clear-sky form: %q is not one of simple, full: %w", st.ClearSky, ErrConfig)
	case st.Turbidity != 0 && !within(st.Turbidity, MinTurbidity, MaxTurbidity):
		return fmt.Errorf("station turbidity: %v outside %g..%g (0 for the default 1): %w", st.Turbidity, MinTurbidity, MaxTurbidity, ErrConfig)
	case !finite(st.NightRsRso) || (st.NightRsRso != 0 && (st.NightRsRso < 0.3 || st.NightRsRso > 1)):
		return fmt.Errorf("station night Rs/Rso: %v outside 0.3..1: %w", st.NightRsRso, ErrConfig)
	case !finite(st.Pressure) || (st.Pressure != 0 && (st.Pressure < MinPressure || st.Pressure > MaxPressure)):
		return fmt.Errorf("station pressure: %v kPa outside %g..%g: %w", st.Pressure, MinPressure, MaxPressure, ErrConfig)
	case !within(st.MinWind2, 0, MaxMinWind2):
		return fmt.Errorf("station minimum wind: %v m/s outside 0..%g (FAO-56 advises 0.5): %w", st.MinWind2, MaxMinWind2, ErrConfig)
	case !finite(st.AeroResistance) || (st.AeroResistance != 0 && (st.AeroResistance < MinAeroResistance || st.AeroResistance > MaxAeroResistance)):
		return fmt.Errorf("station aerodynamic resistance: %v s/m outside %g..%g (0 for none): %w", st.AeroResistance, MinAeroResistance, MaxAeroResistance, ErrConfig)
	}
	return nil
}

// Prepared returns the station with its per-station constants (Pressure)
// filled in, for callers that compute many hours of one station.
func (st Station) Prepared() Station {
	st.Pressure = st.pressure()
	return st
}

// pressure is the given station pressure, or FAO-56 eq. 7 from the elevation.
func (st Station) pressure() float64 {
	if st.Pressure != 0 {
		return st.Pressure
	}
	return Pressure(st.Elevation)
}

// checkFlux validates a measured flux held as MJ m-2 over hours hours.
func checkFlux(name string, mj, hours float64) error {
	if !finite(mj) {
		return fmt.Errorf("%s: %v MJ/m2 is not a finite number: %w", name, mj, ErrInput)
	}
	if w := MJToWatts(mj, hours); math.Abs(w) > MaxFlux {
		return fmt.Errorf("%s: mean %.4g W/m2 outside -%g..%g: %w", name, w, MaxFlux, MaxFlux, ErrInput)
	}
	return nil
}

// Compute returns the reference ET of one period (normally an hour, at most
// one hour) with every intermediate, and the cloudiness carry to pass to the
// next period.
//
// Equations: ASCE-EWRI 2005 eq. 1 with the Table 1 hourly constants for
// Short and Tall, FAO-56 eq. 53 for FAO56. Daytime is Rn > 0; it selects Cd
// and the G/Rn ratio. A measured Rn (h.HasNetRad) and/or G (h.HasSoilHeat)
// replaces the estimate. The cloudiness function fcd is computed from Rs/Rso
// when the sun at mid-period is above 0.3 rad and returned in the new carry;
// otherwise the carried value is used when CarryUsable (it comes from the
// last hour with the sun above 0.3 rad before this night, at most
// MaxCarryAge old), or else the fcd of the station's NightRsRso
// (FcdDefault, Result.CarryExpired when a valid carry was too old); a Valid
// carry whose Fcd lies outside 0.05..1 is treated as absent and dropped.
// Callers pass the last carry whatever gaps there were: the rule decides.
//
// An estimated Rs (h.SolarEstimated) is limited to Rso (Result.SolarCapped);
// u2 below st.MinWind2 is raised to it (Result.WindFloored); with
// st.AeroResistance the equation uses u2 = 208/ra (FAO-56 eq. 4) instead of
// the measured wind.
//
// Result.ET keeps the value of the equation, which can be slightly negative
// at night (dew); see Result.WaterUse.
//
// Bad weather values return an error wrapping ErrInput that names the
// quantity and value; a bad station or reference wraps ErrConfig. On error
// the carry is returned unchanged.
func Compute(st Station, ref Reference, h Hour, carry Carry) (Result, Carry, error) {
	var r Result
	c, ok := hourlyConstants(ref)
	if !ok {
		return r, carry, fmt.Errorf("compute: reference %q is not one of short, tall, fao56: %w", ref, ErrConfig)
	}
	if err := st.Validate(); err != nil {
		return r, carry, fmt.Errorf("compute: %w", err)
	}
	length := h.Length
	if length == 0 {
		length = time.Hour
	}
	if length < time.Minute || length > time.Hour {
		return r, carry, fmt.Errorf("compute: period length: %v outside 1m..1h: %w", length, ErrInput)
	}
	hours := length.Hours()

	t := h.AirTemp
	if err := checkTemp("air temperature", t); err != nil {
		return r, carry, fmt.Errorf("compute: %w", err)
	}
	if !finite(h.Wind2) || h.Wind2 < 0 || h.Wind2 > MaxWind {
		return r, carry, fmt.Errorf("compute: wind speed at 2 m: %v m/s outside 0..%g: %w", h.Wind2, MaxWind, ErrInput)
	}
	if st.AeroResistance > 0 && ref == Tall {
		return r, carry, fmt.Errorf("compute: aerodynamic resistance %v s/m: a fixed resistance applies to the grass references (short, fao56), not tall: %w", st.AeroResistance, ErrConfig)
	}
	rs := h.Solar
	if !finite(rs) {
		return r, carry, fmt.Errorf("compute: solar radiation: %v MJ/m2 is not a finite number: %w", rs, ErrInput)
	}
	if w := MJToWatts(rs, hours); w < -SolarTolerance || w > MaxSolar {
		return r, carry, fmt.Errorf("compute: solar radiation: mean %.4g W/m2 outside 0..%g: %w", w, MaxSolar, ErrInput)
	}
	rs = max(rs, 0)
	if h.HasNetRad {
		if err := checkFlux("net radiation", h.NetRad, hours); err != nil {
			return r, carry, fmt.Errorf("compute: %w", err)
		}
	}
	if h.HasSoilHeat {
		if err := checkFlux("soil heat flux", h.SoilHeat, hours); err != nil {
			return r, carry, fmt.Errorf("compute: %w", err)
		}
	}

	r.Reference = ref
	r.Pressure = st.pressure()                  // FAO-56 eq. 7 unless given
	r.Gamma = PsychrometricConstant(r.Pressure) // FAO-56 eq. 8
	r.Es = SatVapourPressure(t)                 // FAO-56 eq. 11 at the hourly mean T
	r.Delta = satSlopeFrom(t, r.Es)             // FAO-56 eq. 13

	ea := h.Ea
	if !finite(ea) || ea < 0 {
		return Result{}, carry, fmt.Errorf("compute: actual vapour pressure: %v kPa must be >= 0: %w", ea, ErrInput)
	}
	if ea > r.Es {
		if ea > r.Es*(1+EaTolerance) {
			return Result{}, carry, fmt.Errorf("compute: actual vapour pressure: %.4g kPa exceeds saturation %.4g kPa at %.4g degC: %w", ea, r.Es, t, ErrInput)
		}
		ea = r.Es
	}
	r.Ea = ea
	r.VPD = r.Es - ea

	sun := sunForPeriod(st, h.Start, length)
	r.SunElevation = sun.Elevation
	r.Ra = sun.Ra
	if st.ClearSky == ClearSkyFull {
		r.Rso = RsoFull(sun.Ra, r.Pressure, ea, sun.SinBeta, st.Turbidity) // ASCE-EWRI 2005 eq. D.1
	} else {
		r.Rso = RsoSimple(sun.Ra, st.Elevation) // ASCE-EWRI 2005 eq. 47
	}
	if h.SolarEstimated {
		rs, r.SolarCapped = CapAtClearSky(rs, r.Rso)
	}
	r.Rs = rs

	switch {
	case sun.Elevation > HighSunElevation && r.Rso > 0:
		r.RsRso = ClampRsRso(rs / r.Rso)
		r.Fcd = CloudFactor(r.RsRso) // ASCE-EWRI 2005 eq. 45
		r.FcdSource = FcdComputed
		carry = Carry{Fcd: r.Fcd, From: h.Start, Valid: true}
	case carry.Valid && finite(carry.Fcd) && carry.Fcd >= 0.05 && carry.Fcd <= 1 && CarryUsable(st, carry, h.Start):
		r.Fcd = carry.Fcd
		r.RsRso = (r.Fcd + 0.35) / 1.35
		r.FcdSource = FcdCarried
	default:
		// A corrupt or expired carried value is dropped, not passed on.
		r.CarryExpired = carry.Valid && finite(carry.Fcd) && carry.Fcd >= 0.05 && carry.Fcd <= 1
		carry = Carry{}
		r.RsRso = st.NightRsRso
		if r.RsRso == 0 {
			r.RsRso = DefaultNightRsRso
		}
		r.Fcd = CloudFactor(r.RsRso)
		r.FcdSource = FcdDefault
	}

	r.Rns = NetShortwave(rs)                             // FAO-56 eq. 38
	r.Rnl = NetLongwave(c.sigmaHour*hours, t, ea, r.Fcd) // ASCE-EWRI 2005 eq. 44
	if h.HasNetRad {
		r.Rn = h.NetRad
		r.NetRadMeasured = true
	} else {
		r.Rn = r.Rns - r.Rnl // FAO-56 eq. 40
	}
	r.Day = r.Rn > 0
	gRatio := c.gNight
	r.Cn, r.Cd = c.cnNight, c.cdNight
	if r.Day {
		gRatio = c.gDay
		r.Cn, r.Cd = c.cnDay, c.cdDay
	}
	if h.HasSoilHeat {
		r.G = h.SoilHeat
		r.SoilHeatMeasured = true
	} else {
		r.G = gRatio * r.Rn // FAO-56 eq. 45/46; ASCE-EWRI 2005 eq. 65/66 (from memory)
	}

	u2 := h.Wind2
	switch {
	case st.AeroResistance > 0:
		u2 = 208 / st.AeroResistance // FAO-56 eq. 4: ra = 208/u2 over the grass reference
	case u2 < st.MinWind2:
		u2, r.WindFloored = st.MinWind2, true // FAO-56 ch. 4: u2 >= 0.5 m/s in the equation
	}
	r.Wind2 = u2

	// ASCE-EWRI 2005 eq. 1 (FAO-56 eq. 53 with Cn 37, Cd 0.34); Cn is per
	// hour, so the aerodynamic term scales with the period length.
	den := r.Delta + r.Gamma*(1+r.Cd*u2)
	r.RadiationTerm = 0.408 * r.Delta * (r.Rn - r.G) / den
	r.AerodynamicTerm = r.Gamma * r.Cn / (t + 273) * u2 * r.VPD * hours / den
	r.ET = r.RadiationTerm + r.AerodynamicTerm
	return r, carry, nil
}

// WaterUse returns ET limited below at zero, the value a water balance
// should debit (dew does not refill the root zone).
func (r Result) WaterUse() float64 {
	return max(r.ET, 0)
}

// Limits of the hourly method that come from its sources.
const (
	// DefaultMinWind2 is the lower limit of u2 FAO-56 advises for the
	// Penman-Monteith equation: calm air still exchanges vapour through
	// boundary-layer instability and buoyancy, and "limiting u2 >= 0.5 m/s
	// in the ETo equation improves the estimation accuracy under the
	// conditions of very low wind speed" (FAO-56 ch. 4, notes on wind speed
	// data; wording as quoted by a reference implementation, section from
	// memory).
	DefaultMinWind2 = 0.5
	// MaxCarryAge bounds how old a carried night cloudiness value may be: at
	// most one night, about 18 h after the last hour with the sun above
	// 0.3 rad (ASCE-EWRI 2005 carries fcd through the night only; the bound
	// is common practice, no source).
	MaxCarryAge = 18 * time.Hour
	// GreenhouseResistance is a fixed aerodynamic resistance for a reference
	// computed inside a greenhouse, s/m: Fernández et al. (2010, Irrigation
	// Science 28, Penman-Monteith under plastic greenhouse with ra = 295 s/m;
	// from memory).
	GreenhouseResistance = 295.0
)

// CarryUsable reports whether carry may be used for the period starting at
// start at station st: it must be valid, no older than MaxCarryAge, not
// later than start, and no hour between the carry's hour and start may have
// had the sun above 0.3 rad at its mid-point (such an hour would have
// computed a newer value; its data are missing). Live, calc and replay use
// this one rule, so an outage of any length never bridges a stale value.
func CarryUsable(st Station, carry Carry, start time.Time) bool {
	if !carry.Valid || !carry.From.Before(start) || start.Sub(carry.From) > MaxCarryAge {
		return false
	}
	for h := carry.From.Add(time.Hour); h.Before(start); h = h.Add(time.Hour) {
		if sunForPeriod(st, h, time.Hour).Elevation > HighSunElevation {
			return false
		}
	}
	return true
}
