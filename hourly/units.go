package hourly

import (
	"errors"
	"fmt"
	"math"
)

// ErrUnit is wrapped by ToCanonical when a quantity or unit name is not known.
var ErrUnit = errors.New("unknown unit")

// Exact conversion factors (definitions of the units, from memory: the
// international inch 25.4 mm, the international mile 1609.344 m, the knot
// 1852 m per hour).
const (
	mmPerInch    = 25.4
	msPerMph     = 0.44704
	msPerKmh     = 1.0 / 3.6
	msPerKnot    = 1852.0 / 3600.0
	kelvinOffset = 273.15
	// WattsToMJPerHour turns a mean flux in W m-2 into MJ m-2 over one hour
	// (3600 s x 1e-6), FAO-56 chapter 3 unit conversions.
	WattsToMJPerHour = 0.0036
)

// FahrenheitToCelsius converts °F to °C.
func FahrenheitToCelsius(f float64) float64 { return (f - 32) * 5 / 9 }

// CelsiusToFahrenheit converts °C to °F.
func CelsiusToFahrenheit(c float64) float64 { return c*9/5 + 32 }

// KelvinToCelsius converts K to °C.
func KelvinToCelsius(k float64) float64 { return k - kelvinOffset }

// CelsiusToKelvin converts °C to K.
func CelsiusToKelvin(c float64) float64 { return c + kelvinOffset }

// MphToMS converts miles per hour to m/s.
func MphToMS(v float64) float64 { return v * msPerMph }

// KmhToMS converts km/h to m/s.
func KmhToMS(v float64) float64 { return v * msPerKmh }

// KnotsToMS converts knots to m/s.
func KnotsToMS(v float64) float64 { return v * msPerKnot }

// HPaToKPa converts hPa (mbar) to kPa.
func HPaToKPa(v float64) float64 { return v / 10 }

// KPaToHPa converts kPa to hPa (mbar).
func KPaToHPa(v float64) float64 { return v * 10 }

// InchesToMM converts inches to mm.
func InchesToMM(v float64) float64 { return v * mmPerInch }

// MMToInches converts mm to inches.
func MMToInches(v float64) float64 { return v / mmPerInch }

// WattsToMJ converts a mean flux in W m-2 held for hours hours into MJ m-2.
func WattsToMJ(w, hours float64) float64 { return w * WattsToMJPerHour * hours }

// MJToWatts converts MJ m-2 accumulated over hours hours into the mean flux in W m-2.
func MJToWatts(mj, hours float64) float64 { return mj / (WattsToMJPerHour * hours) }

type unitConv struct {
	name string
	to   func(float64) float64
}

func identity(v float64) float64 { return v }

var (
	temperatureUnits = []unitConv{{"degC", identity}, {"degF", FahrenheitToCelsius}, {"K", KelvinToCelsius}}
	fluxUnits        = []unitConv{{"W/m2", identity}, {"MJ/m2/h", func(v float64) float64 { return MJToWatts(v, 1) }}}
	unitTable        = map[Quantity][]unitConv{
		AirTemp:        temperatureUnits,
		DewPoint:       temperatureUnits,
		RelHumidity:    {{"%", identity}, {"fraction", func(v float64) float64 { return v * 100 }}},
		VapourPressure: {{"kPa", identity}, {"hPa", HPaToKPa}, {"Pa", func(v float64) float64 { return v / 1000 }}},
		Wind:           {{"m/s", identity}, {"km/h", KmhToMS}, {"mph", MphToMS}, {"knots", KnotsToMS}},
		Solar:          fluxUnits,
		NetRad:         fluxUnits,
		SoilHeat:       fluxUnits,
		Rain:           {{"mm", identity}, {"in", InchesToMM}},
		// A centibar is a kilopascal (1 cbar = 1 kPa, SI definition).
		SoilWater:   {{"%", identity}, {"m3/m3", func(v float64) float64 { return v * 100 }}},
		SoilTension: {{"kPa", identity}, {"cbar", identity}, {"hPa", HPaToKPa}},
	}
)

// CanonicalUnit returns the unit name in which Sample values of q are held
// ("degC", "%", "kPa", "m/s", "W/m2" or "mm"), or "" for an unknown quantity.
func CanonicalUnit(q Quantity) string {
	units := unitTable[q]
	if len(units) == 0 {
		return ""
	}
	return units[0].name
}

// UnitsFor lists the unit names accepted for q, canonical first. It returns a
// new slice each call; nil for an unknown quantity.
func UnitsFor(q Quantity) []string {
	units := unitTable[q]
	if len(units) == 0 {
		return nil
	}
	names := make([]string, len(units))
	for i, u := range units {
		names[i] = u.name
	}
	return names
}

// ToCanonical converts v, expressed in unit, to the canonical unit of q.
// An unknown quantity or unit is an error wrapping ErrUnit; a non-finite
// value is an error wrapping ErrInput.
func ToCanonical(q Quantity, unit string, v float64) (float64, error) {
	units, ok := unitTable[q]
	if !ok {
		return 0, fmt.Errorf("convert unit: quantity %q: %w", q, ErrUnit)
	}
	for _, u := range units {
		if u.name != unit {
			continue
		}
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return 0, fmt.Errorf("convert unit: %s: %v %s is not a finite number: %w", q, v, unit, ErrInput)
		}
		return u.to(v), nil
	}
	return 0, fmt.Errorf("convert unit: %s: unit %q is not one of %v: %w", q, unit, UnitsFor(q), ErrUnit)
}

// CheckUnit reports whether unit is accepted for q, with an error naming the
// accepted units when it is not (for configuration validation).
func CheckUnit(q Quantity, unit string) error {
	_, err := ToCanonical(q, unit, 0)
	return err
}

// WindFactor returns the factor that turns a wind speed measured z metres
// above the ground into the speed at 2 m (FAO-56 eq. 47):
// u2 = uz 4.87 / ln(67.8 z - 5.42). A sensor at exactly 2 m gets factor 1
// (the fit gives 1.0002 there, and no adjustment is the intent). Heights
// outside MinWindHeight..MaxWindHeight are outside the logarithmic profile the
// equation assumes and are an error wrapping ErrInput.
func WindFactor(z float64) (float64, error) {
	if !within(z, MinWindHeight, MaxWindHeight) {
		return 0, fmt.Errorf("wind height: %v m outside %g..%g: %w", z, MinWindHeight, MaxWindHeight, ErrInput)
	}
	if z == 2 {
		return 1, nil
	}
	return 4.87 / math.Log(67.8*z-5.42), nil // FAO-56 eq. 47
}

// WindAt2m adjusts a wind speed u measured z metres above the ground to 2 m
// (FAO-56 eq. 47). See WindFactor for the accepted heights.
func WindAt2m(u, z float64) (float64, error) {
	f, err := WindFactor(z)
	if err != nil {
		return 0, err
	}
	return u * f, nil
}
