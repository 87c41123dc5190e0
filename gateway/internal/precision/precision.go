// Package precision is the one table of how many decimals each kind of
// quantity keeps when the gateway writes it into an MQTT or JSON payload,
// so no message carries 0.21539289829921476 or 7.903066ms. The table is
// presentation, not physics: the computations keep full precision and
// round only at the edge.
package precision

import (
	"fmt"
	"math"
	"strings"
	"time"
)

// Unit names a kind of quantity by its unit; its precision is fixed in the
// table below.
type Unit string

// The units of the payloads; their decimals are in the table (Decimals).
const (
	MM         Unit = "mm"
	MMPerHour  Unit = "mm/h"
	Minutes    Unit = "min"
	Litres     Unit = "L"
	CubicMetre Unit = "m3"
	Celsius    Unit = "°C"
	KPa        Unit = "kPa"
	Percent    Unit = "%"
	MPerS      Unit = "m/s"
	WPerM2     Unit = "W/m2"
	MJPerM2    Unit = "MJ/m2"
	Fraction   Unit = "1"
	Hours      Unit = "h"
	Seconds    Unit = "s"
	Degrees    Unit = "°"
	Radians    Unit = "rad"
)

// table is the one list of units, their decimals and what they measure.
// The steps are common practice, no source: about one step finer than a
// good field sensor resolves or a valve can act on, so rounding never
// hides a real change.
var table = []struct {
	u    Unit
	dec  int
	what string
}{
	{MM, 2, "depths: ET, rain, depletion, RAW, TAW, applied water"},
	{MMPerHour, 2, "application and ET rates"},
	{Minutes, 1, "valve runtimes"},
	{Litres, 1, "water volumes"},
	{CubicMetre, 3, "larger water volumes"},
	{Celsius, 2, "air, dew-point and soil temperatures"},
	{KPa, 3, "air pressure, vapour pressure and its deficit"},
	{Percent, 1, "relative humidity, soil moisture"},
	{MPerS, 2, "wind speed"},
	{WPerM2, 1, "irradiance"},
	{MJPerM2, 3, "radiation summed over an hour"},
	{Fraction, 3, "ratios and coefficients: Kc, Ks, efficiency, cloudiness factor"},
	{Hours, 2, "ages and spans in hours"},
	{Seconds, 3, "durations (a payload carries durations as seconds)"},
	{Degrees, 4, "latitude and longitude"},
	{Radians, 3, "sun elevation"},
}

var decimals = func() map[Unit]int {
	m := make(map[Unit]int, len(table))
	for _, r := range table {
		m[r.u] = r.dec
	}
	return m
}()

// Decimals returns how many decimals u keeps; it panics on a unit missing
// from the table, a programming error caught by the package's tests.
func Decimals(u Unit) int {
	d, ok := decimals[u]
	if !ok {
		panic(fmt.Sprintf("precision: unit %q has no entry in the table", string(u)))
	}
	return d
}

// Round rounds v to the decimals of u (half away from zero). NaN and
// infinities are returned unchanged; a negative zero becomes zero.
func Round(u Unit, v float64) float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return v
	}
	f := math.Pow(10, float64(Decimals(u)))
	r := math.Round(v*f) / f
	if r == 0 {
		return 0
	}
	return r
}

// Ptr returns a pointer to v rounded to u, or nil when v is NaN or
// infinite (a JSON null or an omitted field rather than an encoding error).
func Ptr(u Unit, v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	r := Round(u, v)
	return &r
}

// DurationSeconds returns d in seconds rounded to the Seconds precision:
// the number a payload carries for a duration.
func DurationSeconds(d time.Duration) float64 {
	return Round(Seconds, d.Seconds())
}

// Duration rounds d for a log line or message text, so its String is a
// short Go-parsable duration ("7.9ms", "1m30s", "2h0m0s"): to the
// millisecond below a second, the tenth of a second below a minute, the
// second above.
func Duration(d time.Duration) time.Duration {
	a := d
	if a < 0 {
		a = -a
	}
	switch {
	case a < time.Millisecond:
		return d.Round(time.Microsecond)
	case a < time.Second:
		return d.Round(100 * time.Microsecond)
	case a < time.Minute:
		return d.Round(100 * time.Millisecond)
	default:
		return d.Round(time.Second)
	}
}

// Markdown renders the table as the README documents it: one row per unit
// with its step.
func Markdown() string {
	var b strings.Builder
	b.WriteString("| quantity | unit | rounded to |\n|---|---|---|\n")
	for _, r := range table {
		fmt.Fprintf(&b, "| %s | %s | %s |\n", r.what, r.u, step(r.dec))
	}
	return b.String()
}

func step(d int) string {
	if d == 0 {
		return "1"
	}
	return "0." + strings.Repeat("0", d-1) + "1"
}
