package config

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/hourly"
)

func TestStationDefaults(t *testing.T) {
	c, err := Load(filepath.Join(configDir, "minimal.yaml"))
	require.NoError(t, err)
	st := c.Sites[0].Stations[0]
	assert.Equal(t, hourly.Short, st.Reference)
	assert.Equal(t, hourly.ClearSkySimple, st.ClearSky)
	assert.Equal(t, 2.0, st.WindHeight)
	assert.Equal(t, 0.75, st.MinCoverage)
	assert.Equal(t, 2*time.Minute, st.CloseGrace.D())
	assert.Equal(t, 6*time.Hour, st.LateWindow.D())
	assert.Equal(t, 15*time.Minute, st.SilenceClose.D())
	assert.Equal(t, 5*time.Minute, st.MaxFuture.D())
	// FAO-56 ch. 4 advises u2 >= 0.5 m/s in the equation: the default.
	assert.Equal(t, hourly.Station{Latitude: 38.5, Longitude: -121.7, Elevation: 20, UTCOffset: -8, ClearSky: hourly.ClearSkySimple, MinWind2: 0.5}.Prepared(), st.HourlyStation())
}

// TestStationWindAndGreenhouse: min_wind_m_s 0 turns the floor off;
// inside_greenhouse fixes the aerodynamic resistance.
func TestStationWindAndGreenhouse(t *testing.T) {
	b, err := os.ReadFile(filepath.Join(configDir, "minimal.yaml"))
	require.NoError(t, err)
	src := strings.Replace(string(b), "    sensors:", "    min_wind_m_s: 0\n    inside_greenhouse: true\n    sensors:", 1)
	require.NotEqual(t, string(b), src)
	c, err := Parse([]byte(src))
	require.NoError(t, err)
	hs := c.Sites[0].Stations[0].HourlyStation()
	assert.Zero(t, hs.MinWind2)
	assert.Equal(t, hourly.GreenhouseResistance, hs.AeroResistance)
}

func TestFarmExample(t *testing.T) {
	c, err := Load(filepath.Join(configDir, "farm.yaml"))
	require.NoError(t, err)
	require.Len(t, c.Sites, 2)

	terrace := c.Sites[0].StationByID("terrace")
	require.NotNil(t, terrace)
	assert.Equal(t, -34.62, terrace.Latitude)
	assert.Equal(t, 142.21, terrace.Longitude)
	assert.Equal(t, 61.0, terrace.Elevation)
	assert.Equal(t, 10.0, terrace.UTCOffset)
	assert.Equal(t, 3.0, terrace.WindHeight)
	assert.Equal(t, 3*time.Minute, terrace.CloseGrace.D())
	assert.Equal(t, 12*time.Hour, terrace.LateWindow.D())
	assert.Equal(t, 20*time.Minute, terrace.SilenceClose.D())
	assert.Equal(t, 2*time.Minute, terrace.MaxFuture.D())
	hum := terrace.Sensors[1]
	assert.Equal(t, FormatJSON, hum.Format)
	assert.Equal(t, "rh", hum.ValueKey)
	assert.Equal(t, "ts", hum.TimeKey)
	wind := terrace.Sensors[2]
	assert.Equal(t, "value", wind.ValueKey, "json value_key default")
	assert.Equal(t, "time", wind.TimeKey, "json time_key default")
	gauge := terrace.Sensors[4]
	assert.Equal(t, Channel{Quantity: hourly.Rain, RainMode: RainTips, MMPerTip: 0.2}, gauge.Channel)

	creek := c.Sites[0].StationByID("creek")
	require.NotNil(t, creek)
	assert.Equal(t, hourly.Tall, creek.Reference)
	assert.Equal(t, hourly.ClearSkyFull, creek.ClearSky)
	combo := creek.Sensors[0]
	assert.Equal(t, "epoch_ms", combo.TimeKey)
	assert.Equal(t, []string{"dewpt_f", "rain_total_in", "solar_wm2", "temp_f", "wind_mph"}, SortedKeys(combo.Fields))
	assert.Equal(t, Channel{Quantity: hourly.Rain, Unit: "in", RainMode: RainCounter, RolloverAt: 655.35}, combo.Fields["rain_total_in"])
	assert.Equal(t, []string{"battery_v", "rssi"}, combo.Ignore)

	north := c.Sites[1].StationByID("north")
	require.NotNil(t, north)
	assert.Equal(t, hourly.FAO56, north.Reference)
	pack := north.Sensors[0]
	assert.Len(t, pack.Records, 7)
	assert.Equal(t, pack.Records, pack.Channels())
	assert.Equal(t, Channel{Quantity: hourly.Rain, RainMode: RainCounter, MMPerTip: 0.254, RolloverAt: 65536}, pack.Records["urn:dev:flats-north:tips"])
	assert.Equal(t, "", pack.ValueKey)
	assert.Equal(t, "", pack.TimeKey)
}

// TestEveryProblemListed: validation does not stop at the first problem.
func TestEveryProblemListed(t *testing.T) {
	doc := `
broker: {url: "ftp://x", max_inflight: -1}
sites:
  - id: a
    stations:
      - id: s
        latitude: 91
        longitude: 181
        elevation_m: 10000
        utc_offset_hours: -13
        sensors:
          - {id: t, topic: a/t, format: number, quantity: air_temp, unit: F}
`
	_, err := Parse([]byte(doc))
	var ve *ValidationError
	require.ErrorAs(t, err, &ve)
	msg := err.Error()
	for _, want := range []string{
		`broker.url: scheme must be tcp, ssl, tls, ws or wss, got "ftp://x"`,
		`broker.max_inflight: must be between 1 and 65535, got -1`,
		`sites[0].stations[0].latitude: must be between -90 and 90 degrees, got 91`,
		`sites[0].stations[0].longitude: must be between -180 and 180 degrees (east positive), got 181`,
		`sites[0].stations[0].elevation_m: must be between -500 and 9000 m, got 10000`,
		`sites[0].stations[0].utc_offset_hours: must be between -12 and 14 hours, got -13`,
		`sites[0].stations[0].sensors[0].unit: must be one of degC, degF, K for quantity air_temp, got "F"`,
		`sites[0].stations[0].sensors: no sensor measures wind, which the hourly ET needs`,
		`sites[0].stations[0].sensors: no sensor measures solar, which the hourly ET needs`,
		`sites[0].stations[0].sensors: no sensor measures humidity`,
	} {
		assert.Contains(t, msg, want)
	}
	assert.Len(t, ve.Problems, 10, msg)
}

func TestSensorChannels(t *testing.T) {
	s := Sensor{Format: FormatNumber, Channel: Channel{Quantity: hourly.Wind, Unit: "m/s"}}
	assert.Equal(t, map[string]Channel{"": {Quantity: hourly.Wind, Unit: "m/s"}}, s.Channels())
	assert.True(t, strings.HasPrefix(fmtDur(90*time.Minute), "1h30m"))
	assert.Equal(t, "1h", fmtDur(time.Hour))
	assert.Equal(t, "2m", fmtDur(2*time.Minute))
	assert.Equal(t, "0s", fmtDur(0))
}
