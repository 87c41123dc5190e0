// Package vocab is the one list of the names the gateway gives its
// quantities and fields wherever it writes them: the hourly record on MQTT,
// the retained station and zone state, the store's fields, the calc and
// replay CSV columns (and the weather CSV columns calc reads), the local
// history export, the status API and the morning report. A quantity has one
// name everywhere: its trade symbol or a plain word with the unit as suffix
// (air_temp_c, wind_2m_m_s, ra_mj_m2).
// Each name carries its unit, so its decimals on the wire come from the
// payload rounding table (gateway/internal/precision).
package vocab

import (
	"fmt"
	"strings"

	"etpulse/gateway/internal/precision"
)

// FormatVersion is the version of the output formats named here (the
// hourly record, the retained state payloads, the store's fields and the
// CSV columns). It is written as format_version in every MQTT payload and
// bumped whenever a name or a meaning changes. Version 1 was the unversioned
// format before the names were unified.
const FormatVersion = 2

// Where says in which outputs a name appears.
type Where uint16

// The outputs that write names of the table.
const (
	Record       Where = 1 << iota // hourly record on the results topic
	StationState                   // retained station state
	ZoneState                      // retained zone state
	Store                          // et_hour fields (InfluxDB and the local history, etpulse export)
	HourCSV                        // etpulse calc, one row per hour
	DayCSV                         // etpulse calc --daily
	ReplayCSV                      // etpulse replay
	Status                         // status JSON API (/api/v1)
	Report                         // morning report JSON
	CalcInput                      // etpulse calc, the weather CSV read
)

var whereNames = []struct {
	w    Where
	name string
}{
	{Record, "record"}, {StationState, "station state"}, {ZoneState, "zone state"},
	{Store, "store"}, {CalcInput, "calc input"}, {HourCSV, "calc"}, {DayCSV, "calc --daily"}, {ReplayCSV, "replay"},
	{Status, "status API"}, {Report, "report"},
}

// String lists the outputs, comma-separated.
func (w Where) String() string {
	var parts []string
	for _, n := range whereNames {
		if w&n.w != 0 {
			parts = append(parts, n.name)
		}
	}
	return strings.Join(parts, ", ")
}

// The names of the quantities, one constant per name. Writers that build
// names at run time (store fields, CSV headers) use these.
const (
	ETmm             = "et_mm"
	ETDailyMM        = "et_daily_mm"
	RainMM           = "rain_mm"
	AirTempC         = "air_temp_c"
	AirTempMinC      = "air_temp_min_c"
	AirTempMaxC      = "air_temp_max_c"
	RHPct            = "rh_pct"
	EaKPa            = "ea_kpa"
	EsKPa            = "es_kpa"
	VPDKPa           = "vpd_kpa"
	Wind2mMS         = "wind_2m_m_s"
	SolarMJ          = "solar_mj_m2"
	NetRadMJ         = "net_rad_mj_m2"
	SoilHeatMJ       = "soil_heat_mj_m2"
	PressureKPa      = "pressure_kpa"
	GammaKPaC        = "gamma_kpa_c"
	DeltaKPaC        = "delta_kpa_c"
	SunElevationRad  = "sun_elevation_rad"
	RaMJ             = "ra_mj_m2"
	RsoMJ            = "rso_mj_m2"
	RsMJ             = "rs_mj_m2"
	RsRso            = "rs_rso"
	Fcd              = "fcd"
	RnsMJ            = "rns_mj_m2"
	RnlMJ            = "rnl_mj_m2"
	RnMJ             = "rn_mj_m2"
	GMJ              = "g_mj_m2"
	Cn               = "cn"
	Cd               = "cd"
	RadTermMM        = "rad_term_mm"
	AeroTermMM       = "aero_term_mm"
	Day              = "day"
	SolarCapped      = "solar_capped"
	SolarEstimated   = "solar_estimated"
	WindFloored      = "wind_floored"
	CarryExpired     = "carry_expired"
	NetRadMeasured   = "net_rad_measured"
	SoilHeatMeasured = "soil_heat_measured"
	FcdSource        = "fcd_source"
	FcdCarried       = "fcd_carried"
	FcdDefault       = "fcd_default"
	Revision         = "revision"
	Complete         = "complete"
	Filled           = "filled"
	Fill             = "fill"
	Flags            = "flags"
	FlagCount        = "flag_count"
	LocalStart       = "local_start"
	LengthS          = "length_s"
	Hours            = "hours"
	CoveragePrefix   = "cov_"
	DepletionMM      = "depletion_mm"
	RAWmm            = "raw_mm"
	TAWmm            = "taw_mm"
	TriggerMM        = "trigger_mm"
	TargetMM         = "target_mm"
	TodayETmm        = "today_et_mm"
	YesterdayETmm    = "yesterday_et_mm"
	ETcMM            = "etc_mm"
	EffRainMM        = "eff_rain_mm"
	IrrigationMM     = "irrigation_mm"
	CreditMM         = "credit_mm"
	DepletionStartMM = "depletion_start_mm"
	DepletionEndMM   = "depletion_end_mm"
	FormatVersionKey = "format_version"

	// Input columns of the weather CSV that etpulse calc reads, in the
	// units the file gives (the hour's means of the sensors' readings).
	DewPointC = "dew_point_c"
	WindMS    = "wind_m_s"
	SolarW    = "solar_w_m2"
	NetRadW   = "net_rad_w_m2"
	SoilHeatW = "soil_heat_w_m2"
)

// Name is one row of the table.
type Name struct {
	Name  string
	Unit  precision.Unit // "" for flags, counts and text
	What  string
	Where Where
}

const (
	rec  = Record | Store
	all  = Record | StationState | Store | ReplayCSV
	hcsv = HourCSV | ReplayCSV
)

// table is the vocabulary. README.md, "Names of the quantities", prints it
// (a test keeps the two equal).
var table = []Name{
	{ETmm, precision.MM, "reference ET of the hour (or of the day in calc --daily, the sum of its hours)", all | hcsv | DayCSV | Status | Report},
	{ETDailyMM, precision.MM, "reference ET of the day by the daily equation (FAO-56 eq. 6), for comparison", DayCSV},
	{RainMM, precision.MM, "rain fallen in the hour (or day)", all | DayCSV | Status | Report | CalcInput},
	{AirTempC, precision.Celsius, "mean air temperature of the hour", all | Status | CalcInput},
	{AirTempMinC, precision.Celsius, "lowest hourly mean air temperature of the day", DayCSV},
	{AirTempMaxC, precision.Celsius, "highest hourly mean air temperature of the day", DayCSV},
	{RHPct, precision.Percent, "relative humidity of the hour, 100 ea/es (calc input: the hour's mean)", Status | CalcInput},
	{EaKPa, precision.KPa, "actual vapour pressure (hour mean of the samples' ea)", all | hcsv | DayCSV | CalcInput},
	{EsKPa, precision.KPa, "saturation vapour pressure at the hour's air temperature (FAO-56 eq. 11)", rec | HourCSV},
	{VPDKPa, precision.KPa, "vapour pressure deficit es - ea", rec},
	{Wind2mMS, precision.MPerS, "mean wind speed at 2 m (FAO-56 eq. 47 from the sensor height)", all | DayCSV | CalcInput},
	{SolarMJ, precision.MJPerM2, "incoming solar radiation measured (or estimated, see solar_estimated) over the hour", all | DayCSV | Status},
	{NetRadMJ, precision.MJPerM2, "measured net radiation over the hour (only with a net radiometer)", Record},
	{SoilHeatMJ, precision.MJPerM2, "measured soil heat flux over the hour (only with a heat flux plate)", Record},
	{PressureKPa, precision.KPa, "air pressure from the elevation (FAO-56 eq. 7)", rec},
	{GammaKPaC, precision.KPa, "psychrometric constant, kPa °C-1 (FAO-56 eq. 8)", rec},
	{DeltaKPaC, precision.KPa, "slope of the vapour pressure curve, kPa °C-1 (FAO-56 eq. 13)", rec},
	{SunElevationRad, precision.Radians, "sun elevation at the hour's midpoint", rec},
	{RaMJ, precision.MJPerM2, "extraterrestrial radiation of the hour (FAO-56 eq. 28)", rec | hcsv},
	{RsoMJ, precision.MJPerM2, "clear-sky solar radiation of the hour (FAO-56 eq. 37)", rec | hcsv | Status},
	{RsMJ, precision.MJPerM2, "solar radiation used in the computation (solar_mj_m2 capped at rso_mj_m2)", rec},
	{RsRso, precision.Fraction, "relative shortwave radiation Rs/Rso", rec},
	{Fcd, precision.Fraction, "cloudiness function (ASCE-EWRI 2005 eq. 45)", rec | hcsv},
	{RnsMJ, precision.MJPerM2, "net shortwave radiation (FAO-56 eq. 38)", rec},
	{RnlMJ, precision.MJPerM2, "net longwave radiation (FAO-56 eq. 39, hourly form)", rec},
	{RnMJ, precision.MJPerM2, "net radiation (FAO-56 eq. 40, or measured)", rec | hcsv | DayCSV},
	{GMJ, precision.MJPerM2, "soil heat flux (FAO-56 eq. 45/46, or measured)", rec | hcsv},
	{Cn, precision.Fraction, "numerator constant of the reference (ASCE-EWRI 2005 Table 1)", Record},
	{Cd, precision.Fraction, "denominator constant of the reference (ASCE-EWRI 2005 Table 1)", Record},
	{RadTermMM, precision.MM, "radiation term of the Penman-Monteith equation", rec},
	{AeroTermMM, precision.MM, "aerodynamic term of the Penman-Monteith equation", rec},
	{Day, "", "the sun was up (ASCE-EWRI 2005 day/night soil heat flux)", rec | HourCSV | Status},
	{SolarCapped, "", "solar radiation was above clear-sky and was capped", Record},
	{SolarEstimated, "", "solar_mj_m2 is a gap-filling estimate, not a measurement", Record},
	{WindFloored, "", "wind at 2 m was raised to the floor of 0.5 m/s", Record},
	{CarryExpired, "", "the night cloudiness carry was too old and the default was used", Record},
	{NetRadMeasured, "", "rn_mj_m2 is measured, not estimated", rec},
	{SoilHeatMeasured, "", "g_mj_m2 is measured, not estimated", rec},
	{FcdSource, "", "where fcd came from: computed, carried or default", Record | ReplayCSV},
	{FcdCarried, "", "fcd was carried from the last sunlit hour (store: text is kept out of fields)", Store},
	{FcdDefault, "", "fcd was the default (store)", Store},
	{Revision, "", "revision of the hour: 0 first, then one per late reading that changed it", all | Status},
	{Complete, "", "the hour had enough data to be computed", all | Status},
	{Filled, "", "a gap-filling method was used (store)", Store},
	{Fill, "", "name of the gap-filling method used", Record | StationState | ReplayCSV | Status},
	{Flags, "", "quality flags of the hour", Record | StationState | ReplayCSV | HourCSV | Status},
	{FlagCount, "", "number of quality flags (store)", Store},
	{LocalStart, "", "hour start in station standard time", Record | StationState | ReplayCSV | Status},
	{LengthS, precision.Seconds, "length of the hour bin in seconds", Record},
	{Hours, "", "hours computed in the day or summed", DayCSV | Report},
	{DepletionMM, precision.MM, "root-zone depletion of a zone", ZoneState | Status},
	{RAWmm, precision.MM, "readily available water of a zone (FAO-56 eq. 83)", ZoneState | Status | Report},
	{TAWmm, precision.MM, "total available water of a zone (FAO-56 eq. 82)", ZoneState | Status | Report},
	{TriggerMM, precision.MM, "depletion at which a zone is watered", ZoneState | Status},
	{TargetMM, precision.MM, "depletion a zone is watered back to", ZoneState | Status},
	{TodayETmm, precision.MM, "reference ET of the station's day so far", Status},
	{YesterdayETmm, precision.MM, "reference ET of the station's previous day", Status},
	{ETcMM, precision.MM, "crop ET of a zone (Kc × reference ET, FAO-56 eq. 56)", Status | Report},
	{EffRainMM, precision.MM, "effective rain credited to a zone", Status | Report},
	{IrrigationMM, precision.MM, "irrigation credited to a zone in a balance step", Status},
	{CreditMM, precision.MM, "water credited to a zone by a run report", Status | Report},
	{DepletionStartMM, precision.MM, "zone depletion at the start of the report's day", Report},
	{DepletionEndMM, precision.MM, "zone depletion at the end of the report's day", Report},
	{FormatVersionKey, "", "version of the output formats (vocab.FormatVersion)", Record | StationState | ZoneState},
	{DewPointC, precision.Celsius, "mean dew point of the hour (ea from it, FAO-56 eq. 14)", CalcInput},
	{WindMS, precision.MPerS, "mean wind speed at the sensor height (calc --wind-height)", CalcInput},
	{SolarW, precision.WPerM2, "mean incoming solar radiation over the hour", CalcInput},
	{NetRadW, precision.WPerM2, "mean measured net radiation over the hour (replaces the estimate)", CalcInput},
	{SoilHeatW, precision.WPerM2, "mean measured soil heat flux over the hour, positive into the soil", CalcInput},
}

var byName = func() map[string]Name {
	m := make(map[string]Name, len(table))
	for _, n := range table {
		if _, dup := m[n.Name]; dup {
			panic("vocab: name listed twice: " + n.Name)
		}
		m[n.Name] = n
	}
	return m
}()

// Lookup returns the table row of name. A coverage field (cov_<quantity>)
// is not in the table; see Coverage.
func Lookup(name string) (Name, bool) {
	n, ok := byName[name]
	return n, ok
}

// Names returns a copy of the table, in its order.
func Names() []Name { return append([]Name(nil), table...) }

// Coverage returns the store field of the coverage of quantity q: the
// fraction 0-1 of the hour's slots that had a sample.
func Coverage(q string) string { return CoveragePrefix + q }

// Round rounds v to the decimals of name's unit (precision table). It
// panics on a name without a unit, a programming error caught by tests.
func Round(name string, v float64) float64 {
	n, ok := byName[name]
	if !ok || n.Unit == "" {
		panic(fmt.Sprintf("vocab: %q has no unit to round to", name))
	}
	return precision.Round(n.Unit, v)
}

// Markdown renders the table as README.md prints it.
func Markdown() string {
	var b strings.Builder
	b.WriteString("| name | unit | meaning | where |\n|---|---|---|---|\n")
	for _, n := range table {
		u := string(n.Unit)
		if u == "" {
			u = "—"
		}
		fmt.Fprintf(&b, "| `%s` | %s | %s | %s |\n", n.Name, u, n.What, n.Where)
	}
	return b.String()
}

// sampleUnits are the units of the sensor quantities' samples
// (hourly.Quantity names), for the record's per-quantity statistics.
var sampleUnits = map[string]precision.Unit{
	"air_temp": precision.Celsius, "rel_humidity": precision.Percent, "dew_point": precision.Celsius,
	"vapour_pressure": precision.KPa, "wind": precision.MPerS, "solar": precision.WPerM2,
	"rain": precision.MM, "net_rad": precision.WPerM2, "soil_heat": precision.WPerM2,
}

// RoundSample rounds a sample statistic (min, mean, max) of sensor
// quantity q (an hourly.Quantity name) to its unit's decimals; a quantity
// without a known unit keeps 3 decimals.
func RoundSample(q string, v float64) float64 {
	u, ok := sampleUnits[q]
	if !ok {
		u = precision.Fraction
	}
	return precision.Round(u, v)
}

// RoundFraction rounds a ratio (a coverage, a cloudiness factor) to the
// Fraction decimals.
func RoundFraction(v float64) float64 { return precision.Round(precision.Fraction, v) }
