package controllers

import "time"

// Bounds of a zone's parameters. Zone.Validate and its parts enforce them;
// the configuration translates them to its field paths and never restates
// the numbers.
const (
	// MinKc and MaxKc bound a crop coefficient, constant or of a season
	// stage. FAO-56 Table 12 values stay below about 1.3 before the climate
	// adjustment of eq. 62 (from memory); the bound catches typos such as a
	// percentage (common practice, no source).
	MinKc, MaxKc = 0.0, 2.0
	// MaxRate bounds an application rate, mm/h; a rate must be above 0
	// (common practice, no source: far above any sprinkler or drip design).
	MaxRate = 200.0
	// MaxEfficiency bounds an application efficiency, which must be above
	// 0: a system cannot put more water into the root zone than it delivers.
	MaxEfficiency = 1.0
	// MinRunMinutes and MaxRunMinutes bound the minute caps of a system
	// (min_minutes, max_minutes, max_minutes_per_day): a valve takes whole
	// minutes, and no cap can exceed one day.
	MinRunMinutes, MaxRunMinutes = 1, 24 * 60
	// MinMissingHours and MaxMissingHoursCap bound FailSafe.MaxMissingHours:
	// at most half of the KeepHours of history a zone keeps.
	MinMissingHours, MaxMissingHoursCap = 1, KeepHours / 2
	// MaxFallbackET bounds a monthly fallback reference ET, mm/day, which
	// must be above 0 when the fallback is on (common practice, no source:
	// above the highest daily reference ET of hot, dry, windy sites).
	MaxFallbackET = 20.0
	// MinP and MaxP bound the depletion fraction p, also after the
	// adjustment for ETc (FAO-56 Table 22 footnote, "0.1 <= p <= 0.8"; from
	// memory).
	MinP, MaxP = 0.1, 0.8
	// MaxRootDepth bounds the root depth, m, which must be above 0 (common
	// practice, no source; FAO-56 Table 22 lists up to about 2-3 m, from
	// memory).
	MaxRootDepth = 10.0
	// MaxFieldCapacity bounds the volumetric field capacity, m3/m3, which
	// must be above 0 (FAO-56 Table 19 tops out near 0.5 for clay; from
	// memory).
	MaxFieldCapacity = 0.6
	// MaxAvailableWater bounds a given available water, mm per m of root
	// depth (1000 x MaxFieldCapacity would be an impossible soil; common
	// practice, no source).
	MaxAvailableWater = 400.0
	// MaxCommandAttempts bounds CommandPolicy.MaxAttempts, which is at least
	// 1 (common practice, no source).
	MaxCommandAttempts = 10
	// MaxOverrunMargin bounds CommandPolicy.OverrunMargin, a fraction of the
	// commanded minutes or volume (0-1, i.e. 0-100 %).
	MaxOverrunMargin = 1.0
	// MaxSeasonDays bounds the length of a crop season, days: one year.
	MaxSeasonDays = 366
)

// Forecast input (issue 16): the bounds of ForecastRules.
const (
	// MaxForecastAgeHours bounds ForecastRules.MaxAge, hours: a forecast
	// older than two days is no longer a forecast of the next window
	// (common practice, no source).
	MaxForecastAgeHours = 48
	// MaxForecastRainMinMM bounds ForecastRules.RainMinMM, mm (common
	// practice, no source: above any single run's need).
	MaxForecastRainMinMM = 100.0
)

// Flow meters (issue 16): the bounds of a Meter.
const (
	// MinFlowTolerance and MaxFlowTolerance bound a meter's tolerance, a
	// share of the expected flow: below 5 % a meter's own error (a few per
	// cent for turbine and pulse meters) would alarm, above 100 % a closed
	// valve is never low (common practice, no source).
	MinFlowTolerance, MaxFlowTolerance = 0.05, 1.0
	// MaxFlowDelay bounds how long a flow condition may last before it is
	// reported: a burst left running longer is no longer caught in time
	// (common practice, no source).
	MaxFlowDelay = 2 * time.Hour
)

// Soil-moisture probes (issue 16): the bounds of a ProbeSet.
const (
	// MaxRetentionAlpha bounds the van Genuchten α, 1/kPa: the coarsest
	// texture of Carsel and Parrish (1988), sand, has 0.145 1/cm (1.5
	// 1/kPa, from memory); 20 leaves room for gravelly soils.
	MaxRetentionAlpha = 20.0
	// MaxRetentionN bounds the van Genuchten n (sand 2.68 in Carsel and
	// Parrish 1988, from memory; fitted n of uniform sands reach about 10,
	// van Genuchten 1980 Table 1, from memory).
	MaxRetentionN = 15.0
	// MinProbeSD and MaxProbeSD bound the probe estimate's standard
	// deviation, mm; MaxModelRel the model's relative uncertainty per mm it
	// moves (common practice, no source).
	MinProbeSD, MaxProbeSD = 0.5, 100.0
	MaxModelRel            = 2.0
)
