package config

import (
	"errors"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// A station whose lines the tests below break in several ways at once.
const decodeDoc = `broker: {url: 'tcp://127.0.0.1:1883'}
sites:
- id: lowfield
  stations:
  - id: mast
    latitude: 38.5
    longitude: -121.7
    elevation_m: twenty metres above the creek
    utc_offset_hours: -8
    sensors:
    - {id: t, topic: lowfield/mast/t, format: number, quantity: air_temp, unit: degC}
    - {id: rh, topic: lowfield/mast/rh, format: number, quantity: rel_humidity, unit: '%'}
    - {id: u, topic: lowfield/mast/u, format: number, quantity: wind, unit: m/s}
    - {id: rs, topic: lowfield/mast/rs, format: number, quantity: solar, unit: W/m2}
    close_grace: 2m
    late_window: 5 minutes
    wind_height: 2
  - {id: ridge, latitude: 38.6, longitude: -121.8, elevation_m: 40, utc_offset_hours: -8, close_grace: 1m, late_window: 6 h, sensors: []}
`

func TestDecodeErrorsNameTheField(t *testing.T) {
	_, err := Parse([]byte(decodeDoc))
	require.Error(t, err)
	var ve *ValidationError
	require.True(t, errors.As(err, &ve), "%v", err)
	assert.Equal(t, []string{
		`sites[0].stations[0].elevation_m: must be a number, got "twenty metres above the creek" (line 8)`,
		`sites[0].stations[0].late_window: invalid duration "5 minutes": write a number with a unit (ns, us, ms, s, m, h), e.g. "90s", "15m" or "2h30m" (line 16)`,
		`sites[0].stations[0].wind_height: unknown key, did you mean "wind_height_m"? (line 17)`,
		// Two durations on one line: the column tells which one is bad.
		`sites[0].stations[1].late_window: invalid duration "6 h": write a number with a unit (ns, us, ms, s, m, h), e.g. "90s", "15m" or "2h30m" (line 18)`,
	}, ve.Problems)
}

func TestDecodeErrorShapes(t *testing.T) {
	for _, tc := range []struct{ name, doc, want string }{
		{"mapping expected", "broker: [a, b]\n", "invalid config:\n  broker: must be a mapping, got a list (line 1)"},
		{"list expected", "sites: {id: x}\n", "invalid config:\n  sites: must be a list, got a mapping (line 1)"},
		{"duration as list", "broker: {keepalive: [1, 2]}\n", "invalid config:\n  broker.keepalive: must be a duration like \"15m\", got a list (line 1)"},
		{"secret key as list", "broker: {password: {env: [A]}}\n", "invalid config:\n  broker.password.env: must be text, got a list (line 1)"},
		{"duplicate key", "state: {path: a.db}\nstate: {path: b.db}\n", "invalid config:\n  state: duplicate key, first at line 1 (line 2)"},
		{"whole number", "broker: {max_inflight: many}\n", "invalid config:\n  broker.max_inflight: must be a whole number, got \"many\" (line 1)"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Parse([]byte(tc.doc))
			require.Error(t, err)
			assert.Equal(t, tc.want, err.Error())
		})
	}
}

func TestDecodeSyntaxErrorKeepsYAMLMessage(t *testing.T) {
	_, err := Parse([]byte("broker: {url: x\nsites: ["))
	require.Error(t, err)
	assert.True(t, strings.HasPrefix(err.Error(), "parse config: yaml: line "), err.Error())
}

func TestDurationsStillDecode(t *testing.T) {
	c, err := Parse(minimalWith(t, "", "broker: {url: 'tcp://127.0.0.1:1883', keepalive: 1m30s, connect_timeout: 500ms}"))
	require.NoError(t, err)
	assert.Equal(t, "1m30s", c.Broker.KeepAlive.String())
	assert.Equal(t, "500ms", c.Broker.ConnectTimeout.String())
}

func TestEditDistance(t *testing.T) {
	assert.Equal(t, 0, editDistance("abc", "abc"))
	assert.Equal(t, 1, editDistance("latitud", "latitude"))
	assert.Equal(t, 3, editDistance("kitten", "sitting")) // the textbook example
	assert.Equal(t, 4, editDistance("", "abcd"))
}

// The YAML decoder truncates 2.5 into an int field; the configuration refuses
// it instead, for every whole-number setting, wherever it sits (12.0 is
// whole and accepted).
func TestFractionForWholeNumber(t *testing.T) {
	doc := strings.Replace(decodeDoc, "elevation_m: twenty metres above the creek", "elevation_m: 20", 1)
	doc = strings.Replace(doc, "late_window: 5 minutes", "late_window: 5m", 1)
	doc = strings.Replace(doc, "    wind_height: 2\n", "", 1)
	doc = strings.Replace(doc, "late_window: 6 h, sensors: []}", "late_window: 6h, sensors: []}", 1)
	doc = strings.Replace(doc, "broker: {url: 'tcp://127.0.0.1:1883'}", "broker: {url: 'tcp://127.0.0.1:1883', max_inflight: 2.5}\nalerts: {night_solar: {hours: 3.5}, calm_wind: {daytime_hours: 12.0}}", 1)
	_, err := Parse([]byte(doc))
	require.Error(t, err)
	assert.Equal(t, "invalid config:\n  broker.max_inflight: must be a whole number, got 2.5 (line 1)\n  alerts.night_solar.hours: must be a whole number, got 3.5 (line 2)", err.Error())
}
