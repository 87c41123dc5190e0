package config

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func TestZoneForecastKeys(t *testing.T) {
	var z Zone
	assert.Zero(t, z.forecastRules(), "no forecast key: no forecast used")

	z.Forecast = &ZoneForecast{}
	r := z.forecastRules()
	assert.Equal(t, 12*time.Hour, r.MaxAge)
	assert.Equal(t, 5.0, r.RainMinMM)
	assert.Equal(t, 0.7, r.RainMinProb)

	pct, age := 70.0, Duration(72*time.Hour)
	z.Forecast = &ZoneForecast{RainMinProbability: &pct, MaxAge: &age, Frost: true}
	var p Problems
	z.validateForecast("sites[0].zones[1]", &p)
	err := p.Err()
	require.Error(t, err)
	assert.ErrorContains(t, err, "sites[0].zones[1].forecast.max_age: must be within (0, 48h], got 72h0m0s")
	assert.ErrorContains(t, err, "sites[0].zones[1].forecast.rain_min_probability: must be within 0-1 (a fraction, not a percentage), got 70")
	assert.ErrorContains(t, err, "sites[0].zones[1].forecast.frost: needs weather_holds.frost_below_c")
}

func TestForecastTopic(t *testing.T) {
	assert.Equal(t, "etpulse/lowfield/forecast", ForecastTopic("etpulse", "lowfield"))
}
