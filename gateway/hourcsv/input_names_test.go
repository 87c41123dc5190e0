package hourcsv

import (
	"bytes"
	"context"
	"errors"
	"os"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/vocab"
	"etpulse/hourly"
)

// oldInputNames are the input column names before the vocabulary's style,
// each beside its new name. They are still read, with a deprecation line.
var oldInputNames = [][2]string{
	{"wind_ms", "wind_m_s"},
	{"solar_wm2", "solar_w_m2"},
	{"net_rad_wm2", "net_rad_w_m2"},
	{"soil_heat_wm2", "soil_heat_w_m2"},
	{"dewpoint_c", "dew_point_c"},
}

// TestInputColumnsInVocabulary: every input column but time is a name of
// the vocabulary, listed as a calc input, with a unit.
func TestInputColumnsInVocabulary(t *testing.T) {
	for _, col := range Columns {
		if col == ColTime {
			continue
		}
		n, ok := vocab.Lookup(col)
		if assert.True(t, ok, "input column %s is not in gateway/vocab", col) {
			assert.NotZero(t, n.Where&vocab.CalcInput, "%s: where lacks calc input", col)
			assert.NotEmpty(t, n.Unit, col)
		}
	}
	for _, p := range oldInputNames {
		assert.Contains(t, Columns, p[1])
		assert.NotContains(t, Columns, p[0], "old names are aliases, not listed")
	}
}

// TestNewInputNames reads a file with every new name. The numbers are
// placeholders; the check is that each column reaches its field.
func TestNewInputNames(t *testing.T) {
	src := "time,air_temp_c,dew_point_c,wind_m_s,solar_w_m2,net_rad_w_m2,soil_heat_w_m2\n" +
		"2026-07-01T12:00,30,20,2,800,500,50\n"
	rd, err := NewReader(strings.NewReader(src), Options{})
	require.NoError(t, err)
	assert.Empty(t, rd.Deprecations())
	row, err := rd.Read()
	require.NoError(t, err)
	ea, err := hourly.VapourPressureFromDewPoint(20)
	require.NoError(t, err)
	assert.Equal(t, ea, row.Hour.Ea)
	assert.Equal(t, 2.0, row.Hour.Wind2)
	assert.InDelta(t, 800*0.0036, row.Hour.Solar, 1e-12)
	assert.True(t, row.Hour.HasNetRad)
	assert.InDelta(t, 500*0.0036, row.Hour.NetRad, 1e-12)
	assert.True(t, row.Hour.HasSoilHeat)
	assert.InDelta(t, 50*0.0036, row.Hour.SoilHeat, 1e-12)
}

// TestOldInputNamesSameResults runs calc on the demo file with its header
// in the old names and in the new: the results are identical and the old
// file gets one deprecation line per old name.
func TestOldInputNamesSameResults(t *testing.T) {
	b, err := os.ReadFile("../../testdata/calc/halcyon-terrace.csv")
	require.NoError(t, err)
	newSrc := string(b)
	require.Contains(t, newSrc, "\ntime,air_temp_c,rh_pct,wind_m_s,solar_w_m2,rain_mm\n")
	oldSrc := strings.Replace(newSrc, ",wind_m_s,solar_w_m2,", ",wind_ms,solar_wm2,", 1)

	run := func(src string) (string, string) {
		var out, report bytes.Buffer
		_, err := Calc(context.Background(), strings.NewReader(src), &out, CalcOptions{
			Station:   hourly.Station{Latitude: 37.48, Longitude: 14.06, Elevation: 310, UTCOffset: 1},
			Reference: hourly.Short, WindHeight: 3, Report: &report,
		})
		require.NoError(t, err)
		return out.String(), report.String()
	}
	newOut, newReport := run(newSrc)
	oldOut, oldReport := run(oldSrc)
	assert.Equal(t, newOut, oldOut)
	assert.NotContains(t, newReport, "is now")
	assert.Equal(t, "column wind_ms is now wind_m_s; the old name is read until a later release\n"+
		"column solar_wm2 is now solar_w_m2; the old name is read until a later release\n"+newReport,
		oldReport)

	// The measured fluxes and the dew point by their old names.
	rd, err := NewReader(strings.NewReader("time,air_temp_c,dewpoint_c,wind_ms,solar_wm2,net_rad_wm2,soil_heat_wm2\n"+
		"2026-07-01T12:00,30,20,2,800,500,50\n"), Options{})
	require.NoError(t, err)
	assert.Len(t, rd.Deprecations(), 5)
	row, err := rd.Read()
	require.NoError(t, err)
	assert.True(t, row.Hour.HasNetRad && row.Hour.HasSoilHeat)
	assert.InDelta(t, 50*0.0036, row.Hour.SoilHeat, 1e-12)
}

// TestOldAndNewNameRefused: a file naming one quantity by its old and its
// new name is refused, naming both; a bad cell of an old-name column is
// reported under the name the file uses.
func TestOldAndNewNameRefused(t *testing.T) {
	base := []string{"time", "air_temp_c", "rh_pct", "wind_m_s", "solar_w_m2"}
	for _, p := range oldInputNames {
		head := append([]string(nil), base...)
		switch p[1] {
		case "wind_m_s", "solar_w_m2":
		case "dew_point_c":
			head[2] = p[1] // in place of rh_pct: one humidity column
		default:
			head = append(head, p[1])
		}
		head = append(head, p[0])
		_, err := NewReader(strings.NewReader(strings.Join(head, ",")+"\n"), Options{})
		require.True(t, errors.Is(err, ErrHeader), "%s: %v", p[0], err)
		assert.Contains(t, err.Error(), `columns "`+p[1]+`" and "`+p[0]+`" are the new and the old name of one quantity: keep "`+p[1]+`"`)
	}

	rd, err := NewReader(strings.NewReader("time,air_temp_c,rh_pct,wind_ms,solar_wm2\n2026-07-01T12:00,30,50,-1,800\n"), Options{})
	require.NoError(t, err)
	_, err = rd.Read()
	assert.EqualError(t, err, `line 2: column wind_ms: value "-1": wind speed must be >= 0 m/s`)
}
