package zones

import (
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func TestDecodeForecast(t *testing.T) {
	f, err := DecodeForecast([]byte(`{"issued":"2026-07-01T18:00:00Z","periods":[
		{"start":"2026-07-02T00:00:00Z","end":"2026-07-02T06:00:00Z","eto_mm":1.5,"rain_mm":12,"rain_probability":0.8,"min_temp_c":4},
		{"start":"2026-07-02T06:00:00Z","end":"2026-07-02T12:00:00Z","rain_mm":3}]}`))
	require.NoError(t, err)
	require.Len(t, f.Periods, 2)
	assert.True(t, f.Periods[0].HasETo && f.Periods[0].HasMinTemp)
	assert.Equal(t, 0.8, f.Periods[0].RainProb)
	assert.False(t, f.Periods[1].HasETo || f.Periods[1].HasMinTemp)
	assert.Equal(t, 1.0, f.Periods[1].RainProb, "rain without a probability counts as certain")

	for in, want := range map[string]string{
		`{"periods":[]}`: "forecast issued: missing",
		`{"issued":"2026-07-01T18:00:00Z","periods":[{"start":"2026-07-02T00:00:00Z","end":"2026-07-02T06:00:00Z","rain_probability":80}]}`: "rain_probability: must be within 0-1, got 80",
		`{"issued":"2026-07-01T18:00:00Z","rain":3}`: `unknown field "rain"`,
	} {
		_, err := DecodeForecast([]byte(in))
		assert.ErrorContains(t, err, want, in)
	}
}
