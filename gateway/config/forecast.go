package config

import (
	"time"

	"etpulse/controllers"
)

// ZoneForecast is how a zone uses its site's forecast, published on
// ForecastTopic by the integrator's automation. Absent: no forecast is used.
type ZoneForecast struct {
	// MaxAge: a forecast issued longer ago is ignored with a warning.
	// Default 12h.
	MaxAge *Duration `yaml:"max_age"`
	// RainMinMM and RainMinProbability: forecast rain shortens or skips a
	// run when at least RainMinMM of effective rain is expected before the
	// next window at a probability of at least RainMinProbability (0-1).
	// Defaults 5 mm and 0.7; rain_min_mm 0 turns the use of rain off.
	RainMinMM          *float64 `yaml:"rain_min_mm"`
	RainMinProbability *float64 `yaml:"rain_min_probability"`
	// Frost holds a run while the forecast minimum temperature in its
	// window is below weather_holds.frost_below_c.
	Frost bool `yaml:"frost"`
}

// The defaults of a zone's forecast use (common practice, no source).
const (
	DefaultForecastMaxAge      = 12 * time.Hour
	DefaultForecastRainMinMM   = 5.0
	DefaultForecastRainMinProb = 0.7
)

// ForecastTopic is the topic of a site's forecast: <prefix>/<site>/forecast
// (retained is fine: the latest forecast is what counts).
func ForecastTopic(prefix, site string) string { return prefix + "/" + site + "/forecast" }

// forecastRules converts the zone's forecast keys, with their defaults.
func (z *Zone) forecastRules() controllers.ForecastRules {
	f := z.Forecast
	if f == nil {
		return controllers.ForecastRules{}
	}
	return controllers.ForecastRules{MaxAge: orDuration(f.MaxAge, DefaultForecastMaxAge),
		RainMinMM: orFloat(f.RainMinMM, DefaultForecastRainMinMM), RainMinProb: orFloat(f.RainMinProbability, DefaultForecastRainMinProb),
		Frost: f.Frost}
}

func (z *Zone) validateForecast(path string, p *Problems) {
	if z.Forecast == nil {
		return
	}
	path += ".forecast"
	r := z.forecastRules()
	if !(r.MaxAge > 0 && r.MaxAge <= controllers.MaxForecastAgeHours*time.Hour) {
		p.Addf(path+".max_age", "must be within (0, %dh], got %v", controllers.MaxForecastAgeHours, r.MaxAge)
	}
	if !(r.RainMinMM >= 0 && r.RainMinMM <= controllers.MaxForecastRainMinMM) {
		p.Addf(path+".rain_min_mm", "must be within 0-%s mm, got %s", fmtF(controllers.MaxForecastRainMinMM), fmtF(r.RainMinMM))
	}
	if !(r.RainMinProb >= 0 && r.RainMinProb <= 1) {
		p.Addf(path+".rain_min_probability", "must be within 0-1 (a fraction, not a percentage), got %s", fmtF(r.RainMinProb))
	}
	if r.Frost && z.Holds.FrostBelowC == nil {
		p.Addf(path+".frost", "needs weather_holds.frost_below_c, the temperature that holds the zone")
	}
}
