package config

import (
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/hourly"
)

const alertsDir = "../../testdata/quality/config"

// TestInvalidAlertConfigs loads every testdata/quality/config/invalid-*.yaml
// and compares the error with the paired .txt exactly; each file breaks one
// rule.
func TestInvalidAlertConfigs(t *testing.T) { checkInvalidDir(t, alertsDir) }

func TestAlertExample(t *testing.T) {
	c, err := Load(filepath.Join(alertsDir, "alerts.yaml"))
	require.NoError(t, err)
	a := &c.Alerts
	assert.Equal(t, 30*time.Minute, a.UpdateEvery.D())
	assert.Equal(t, 45*time.Minute, a.ClearAfter.D())

	at := a.Limits(hourly.AirTemp)
	assert.Equal(t, Limits{Min: -25, Max: 48, SpikePerMinute: 2.5, StuckHours: 3, StuckTolerance: 0.001, Silence: 15 * time.Minute, Response: RespondKeep}, at)
	assert.Equal(t, 30*time.Minute, a.Limits(hourly.Wind).Silence)
	assert.Equal(t, DefaultLimits(hourly.RelHumidity), a.Limits(hourly.RelHumidity), "unset quantities keep every default")

	assert.Equal(t, RespondExclude, a.ResponseFor("fernhollow", "mast", hourly.Solar))
	assert.Equal(t, RespondStop, a.ResponseFor("fernhollow", "terrace", hourly.AirTemp))
	assert.Equal(t, RespondKeep, a.ResponseFor("fernhollow", "mast", hourly.AirTemp))
	assert.True(t, a.StationChoices("fernhollow", "mast").HumidityDrift)
	assert.False(t, a.StationChoices("fernhollow", "cellar").HumidityDrift)
	assert.True(t, a.StationChoices("fernhollow", "cellar").Neighbours)

	assert.Equal(t, 12.0, *a.NightSolar.LimitWm2)
	assert.Equal(t, DefaultDarkBelowRad, *a.NightSolar.DarkBelowRad)
	assert.Equal(t, 4, a.HumidityDrift.Nights)
	assert.Equal(t, 2.5, *a.HumidityDrift.DewGap)
	assert.Equal(t, 0.4, *a.Calm.Speed)
	assert.Equal(t, map[hourly.Quantity]float64{hourly.AirTemp: 1.5, hourly.RelHumidity: 10, hourly.Wind: 1.5, hourly.Solar: 0.15}, a.Neighbours.Tolerance)
	assert.Equal(t, "127.0.0.1:9470", c.HTTP.Listen)
}

func TestAlertDefaults(t *testing.T) {
	var a Alerts
	a.ApplyDefaults()
	assert.False(t, a.Disabled)
	assert.Equal(t, "etpulse", a.TopicPrefix)
	assert.Equal(t, DefaultAlertUpdateEvery, a.UpdateEvery.D())
	assert.Equal(t, DefaultEnvelopeLow, *a.SolarEnvelope.LowRatio)
	assert.Equal(t, 0.0, *a.HumidityDrift.DewGap, "dew gap criterion off by default")
	var h HTTP
	h.setDefaults()
	assert.Equal(t, DefaultHTTPListen, h.Listen)
}

// TestDefaultLimitsEveryQuantity: every quantity a sensor may carry has a
// plausible range by default, so a new quantity cannot arrive with the
// zero range that refuses every reading as "above the plausible maximum 0".
func TestDefaultLimitsEveryQuantity(t *testing.T) {
	for _, q := range hourly.Quantities {
		l := DefaultLimits(q)
		assert.Greater(t, l.Max, l.Min, "%s: default plausible range", q)
	}
}
