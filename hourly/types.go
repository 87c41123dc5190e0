// Package hourly computes hourly Penman-Monteith reference evapotranspiration
// (ASCE-EWRI 2005 standardized short and tall references, FAO-56 hourly grass)
// from one hour of weather, and aggregates raw sensor samples into such hours.
//
// The package is pure: it imports only the standard library, reads no clock
// and does no I/O. Every time it needs is passed in.
package hourly

import (
	"errors"
	"time"
)

// Reference selects the reference surface and its constants.
type Reference string

// The supported references.
const (
	// Short is the ASCE-EWRI 2005 standardized short (clipped grass) reference, ETos.
	Short Reference = "short"
	// Tall is the ASCE-EWRI 2005 standardized tall (alfalfa) reference, ETrs.
	Tall Reference = "tall"
	// FAO56 is the FAO-56 hourly grass reference (rs = 70 s/m, FAO-56 eq. 53).
	FAO56 Reference = "fao56"
)

// ClearSky selects the clear-sky solar radiation (Rso) form.
type ClearSky string

// The supported clear-sky forms.
const (
	// ClearSkySimple is Rso = (0.75 + 2e-5 z) Ra (FAO-56 eq. 37, ASCE-EWRI 2005 eq. 47).
	ClearSkySimple ClearSky = "simple"
	// ClearSkyFull is the ASCE-EWRI 2005 Appendix D form with precipitable
	// water and turbidity (eq. D.1-D.8).
	ClearSkyFull ClearSky = "full"
)

// ErrInput is wrapped by every error about a bad input value, so callers can
// tell bad data from bad configuration.
var ErrInput = errors.New("bad input")

// Station is the fixed description of a weather station.
type Station struct {
	Latitude  float64  // degrees, north positive
	Longitude float64  // degrees, east positive
	Elevation float64  // m above sea level
	UTCOffset float64  // hours of the station's standard time relative to UTC, e.g. -8
	ClearSky  ClearSky // Rso form; empty means ClearSkySimple

	// Turbidity is Kt of the ASCE-EWRI 2005 Appendix D clear-sky form
	// (1.0 clean air, 0.5 extremely turbid); zero means 1.0.
	Turbidity float64
	// NightRsRso is the Rs/Rso assumed for the night cloudiness function when
	// no carried value exists (FcdDefault); zero means DefaultNightRsRso (0.8).
	NightRsRso float64
	// Pressure is the station's mean air pressure in kPa; zero means FAO-56
	// eq. 7 from Elevation. Prepared fills it once, so the per-hour
	// computation does not repeat a per-station constant.
	Pressure float64
	// MinWind2 is the lower limit of the wind speed at 2 m used in the
	// equation, m/s; zero means none. FAO-56 advises u2 >= 0.5 m/s
	// (DefaultMinWind2); callers that follow it set it.
	MinWind2 float64
	// AeroResistance, when above zero, fixes the aerodynamic resistance ra
	// in s/m instead of deriving it from the wind: the form for a station
	// inside a greenhouse (GreenhouseResistance). The measured wind is then
	// not used and MinWind2 does not apply.
	AeroResistance float64
}

// Hour is one period (normally one clock hour) of aggregated weather, the
// input of Compute.
type Hour struct {
	// Start is the start of the period. Its location does not matter: it is
	// converted to the station's standard time for solar geometry.
	Start time.Time
	// Length of the period; zero means one hour.
	Length time.Duration

	AirTemp float64 // mean air temperature, °C
	Ea      float64 // actual vapour pressure, kPa
	Wind2   float64 // mean wind speed at 2 m, m/s
	Solar   float64 // incoming solar radiation Rs over the period, MJ m-2 per period

	// NetRad is a measured net radiation over the period, MJ m-2; used when HasNetRad.
	NetRad    float64
	HasNetRad bool
	// SoilHeat is a measured soil heat flux over the period, MJ m-2; used when HasSoilHeat.
	SoilHeat    float64
	HasSoilHeat bool

	// SolarEstimated says Solar is an estimate (e.g. Hargreaves-Samani,
	// FAO-56 eq. 50), not a measurement; Compute limits it to the clear-sky
	// radiation Rso and says so in Result.SolarCapped.
	SolarEstimated bool
}

// FcdSource tells where the cloudiness function of an hour came from.
type FcdSource string

// The sources of fcd.
const (
	// FcdComputed: the sun was high enough (elevation > 0.3 rad) to compute
	// fcd from Rs/Rso in this hour.
	FcdComputed FcdSource = "computed"
	// FcdCarried: night or low sun; the value of the last hour with the sun
	// above 0.3 rad was carried (ASCE-EWRI 2005, eq. 45 and its notes).
	FcdCarried FcdSource = "carried"
	// FcdDefault: no usable carried value was available (the first night
	// after start-up, or a carry older than the current night, see
	// CarryUsable); a documented default was used and the result says so.
	FcdDefault FcdSource = "default"
)

// Carry is the night-time cloudiness state carried from hour to hour. The
// caller keeps it (and persists it) between calls to Compute.
type Carry struct {
	Fcd   float64   // cloudiness function of the last hour with sun elevation > 0.3 rad
	From  time.Time // start of that hour
	Valid bool      // false until a value has been computed
}

// Result holds the reference ET of one hour and every intermediate, in the
// units named beside each field, for audit.
type Result struct {
	Reference Reference
	Day       bool // daytime by the soil heat flux rule: Rn > 0

	Pressure float64 // P, kPa
	Gamma    float64 // psychrometric constant γ, kPa/°C
	Delta    float64 // slope of the saturation vapour pressure curve Δ, kPa/°C
	Es       float64 // saturation vapour pressure at the mean air temperature, kPa
	Ea       float64 // actual vapour pressure, kPa
	VPD      float64 // es - ea, kPa

	SunElevation float64   // sun elevation at the period mid-point, rad
	Ra           float64   // extraterrestrial radiation, MJ m-2 per period
	Rso          float64   // clear-sky radiation, MJ m-2 per period
	RsRso        float64   // relative shortwave radiation used for fcd (0.3-1.0)
	Fcd          float64   // cloudiness function
	FcdSource    FcdSource // where Fcd came from
	Rns          float64   // net shortwave radiation, MJ m-2 per period
	Rnl          float64   // net long-wave radiation, MJ m-2 per period
	Rn           float64   // net radiation, MJ m-2 per period (measured when NetRadMeasured)
	G            float64   // soil heat flux, MJ m-2 per period (measured when SoilHeatMeasured)

	NetRadMeasured   bool
	SoilHeatMeasured bool

	Rs          float64 // incoming solar radiation used, MJ m-2 per period (Hour.Solar, capped at Rso when estimated)
	SolarCapped bool    // an estimated Rs exceeded Rso and was limited to it
	Wind2       float64 // wind speed at 2 m used in the equation, m/s (after MinWind2; 208/ra with AeroResistance)
	WindFloored bool    // the measured u2 was below Station.MinWind2 and the limit was used
	// CarryExpired: a valid carry was offered but was older than the current
	// night (see CarryUsable) and the default was used instead.
	CarryExpired bool

	Cn float64 // numerator constant of the standardized equation
	Cd float64 // denominator constant of the standardized equation

	RadiationTerm   float64 // 0.408 Δ (Rn - G) / (Δ + γ (1 + Cd u2)), mm per period
	AerodynamicTerm float64 // γ Cn/(T+273) u2 (es - ea) / (Δ + γ (1 + Cd u2)), mm per period
	// ET is the reference ET in mm per period as the equation gives it. It
	// may be slightly negative in calm humid night hours (condensation/dew);
	// it is kept so, for audit. Water-balance callers use WaterUse.
	ET float64
}

// Quantity names a measured weather quantity.
type Quantity string

// The quantities a station can measure. Sample values are in the canonical
// unit named beside each.
const (
	AirTemp        Quantity = "air_temp"        // °C
	RelHumidity    Quantity = "rel_humidity"    // %
	DewPoint       Quantity = "dew_point"       // °C
	VapourPressure Quantity = "vapour_pressure" // kPa
	Wind           Quantity = "wind"            // m/s at the sensor height
	Solar          Quantity = "solar"           // W m-2 (instantaneous or interval mean)
	Rain           Quantity = "rain"            // mm fallen since the previous sample (increment)
	NetRad         Quantity = "net_rad"         // W m-2
	SoilHeat       Quantity = "soil_heat"       // W m-2, positive into the soil
	// SoilWater and SoilTension are soil-moisture probe readings at the
	// depth the probe's zone configuration states; the pipeline hands them
	// to the zones, they take no part in ET.
	SoilWater   Quantity = "soil_water"   // volumetric water content, % (m3/m3 x 100)
	SoilTension Quantity = "soil_tension" // soil water tension (suction), kPa, positive
)

// Quantities lists every Quantity in a stable order.
var Quantities = []Quantity{AirTemp, RelHumidity, DewPoint, VapourPressure, Wind, Solar, Rain, NetRad, SoilHeat, SoilWater, SoilTension}

// Sample is one reading of one sensor, already converted to the canonical
// unit of its quantity.
type Sample struct {
	Sensor   string // sensor id, unique within the station
	Quantity Quantity
	Time     time.Time
	Value    float64
}

// Stats summarises the samples of one quantity within one hour.
type Stats struct {
	Count    int     // samples used
	Min      float64 // canonical unit
	Max      float64
	Mean     float64
	Coverage float64 // fraction (0-1) of the hour's coverage slots holding at least one sample
}

// Record is one station-hour as the gateway publishes and stores it: the
// aggregated inputs, their coverage, the result with every intermediate,
// quality flags and a revision number (0 for the first emission, +1 for each
// re-emission after a late reading).
type Record struct {
	Site      string
	Station   string
	Reference Reference

	Start      time.Time // hour start, UTC
	End        time.Time // hour end, UTC
	LocalStart string    // hour start in station standard time, "2006-01-02T15:04"

	Revision int
	Complete bool // false when a required quantity fell short of the coverage threshold; Result is then nil

	Inputs Hour               // aggregated inputs (Wind2 already adjusted to 2 m)
	Stats  map[Quantity]Stats // per-quantity sample summary
	Rain   float64            // rain sum over the hour, mm
	Result *Result            // nil when the hour is incomplete or could not be computed
	Carry  Carry              // cloudiness carry after this hour
	Flags  []string           // quality flags, e.g. "incomplete:solar", "fcd:default", "alert:rh-drift"
	Fill   string             // name of a gap-filling method used, empty when none
}

// Flags a Result adds to its record (Result.Flags), the same words in the
// live records, replay and calc.
const (
	FlagFcdDefault  = "fcd:default"         // no usable carried cloudiness; the start-up default was used
	FlagFcdExpired  = "fcd:carry-expired"   // a carried cloudiness older than the current night was dropped
	FlagWindFloor   = "wind:floor"          // u2 was below the station's minimum; the minimum was used
	FlagSolarCapped = "solar:capped-at-rso" // an estimated Rs exceeded Rso and was limited to it
)

// Flags appends to dst the flags that describe how r was computed.
func (r *Result) Flags(dst []string) []string {
	if r.FcdSource == FcdDefault {
		dst = append(dst, FlagFcdDefault)
	}
	if r.CarryExpired {
		dst = append(dst, FlagFcdExpired)
	}
	if r.WindFloored {
		dst = append(dst, FlagWindFloor)
	}
	if r.SolarCapped {
		dst = append(dst, FlagSolarCapped)
	}
	return dst
}
