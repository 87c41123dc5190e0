package hourcsv

import (
	"errors"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestWindColumnNames: the wind column is wind_m_s (at the wind height) or
// wind_2m_m_s (at 2 m, the vocabulary's name); wind_2m_m_s with a wind
// height other than 2 m, and both columns at once, are refused. The
// numbers are placeholders.
func TestWindColumnNames(t *testing.T) {
	csv := func(wind string) string {
		return "time,air_temp_c,rh_pct," + wind + ",solar_w_m2\n2026-07-14T10:00,24.5,40,3.5,600\n"
	}
	for _, col := range []string{"wind_m_s", "wind_2m_m_s"} {
		rd, err := NewReader(strings.NewReader(csv(col)), Options{WindHeight: 2})
		require.NoError(t, err, col)
		row, err := rd.Read()
		require.NoError(t, err, col)
		assert.Equal(t, 3.5, row.Hour.Wind2, col)
	}

	_, err := NewReader(strings.NewReader(csv("wind_2m_m_s")), Options{WindHeight: 3})
	require.True(t, errors.Is(err, ErrHeader), "%v", err)
	assert.Contains(t, err.Error(), `column "wind_2m_m_s" is wind at 2 m, but the wind height is 3 m: name the column "wind_m_s"`)

	_, err = NewReader(strings.NewReader("time,air_temp_c,rh_pct,wind_m_s,wind_2m_m_s,solar_w_m2\n"), Options{})
	require.True(t, errors.Is(err, ErrHeader), "%v", err)
	assert.Contains(t, err.Error(), `columns "wind_m_s" and "wind_2m_m_s" both give the wind: keep one`)
}
