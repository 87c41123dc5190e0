package main

import (
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestCalcOldColumnNames: a weather CSV with the input names from before
// the vocabulary gives the same results as with the new names, and one
// deprecation line per old name on stderr. FAO-56 Example 19's daytime
// hour (Rs 2.450 MJ m-2 h-1 = 680.5556 W m-2), as in TestCalcFAO56Example19.
func TestCalcOldColumnNames(t *testing.T) {
	args := []string{"--lat", "16.2167", "--lon", "-16.25", "--elevation", "8", "--utc-offset", "-1", "--reference", "fao56"}
	const row = "2026-10-01T14:00,38,52,3.3,680.5556\n"
	code, newOut, newErr := calc(t, "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n"+row, args...)
	require.Equal(t, exitOK, code, newErr)
	assert.Empty(t, newErr)
	code, oldOut, oldErr := calc(t, "time,air_temp_c,rh_pct,wind_ms,solar_wm2\n"+row, args...)
	require.Equal(t, exitOK, code, oldErr)
	assert.Equal(t, newOut, oldOut)
	assert.Equal(t, "etpulse calc: column wind_ms is now wind_m_s; the old name is read until a later release\n"+
		"etpulse calc: column solar_wm2 is now solar_w_m2; the old name is read until a later release\n", oldErr)

	code, _, errOut := calc(t, "time,air_temp_c,rh_pct,wind_m_s,wind_ms,solar_w_m2\n"+row, args...)
	assert.Equal(t, exitError, code)
	assert.Contains(t, errOut, `columns "wind_m_s" and "wind_ms" are the new and the old name of one quantity: keep "wind_m_s"`)
}

// TestCalcHelpOldColumnNames: the help names every old column name it
// still reads, beside the new one.
func TestCalcHelpOldColumnNames(t *testing.T) {
	_, out, _ := calc(t, "", "--help")
	assert.Contains(t, out, "old names wind_ms, solar_wm2, net_rad_wm2,\n  soil_heat_wm2 and dewpoint_c")
	assert.Contains(t, out, "  wind_2m_m_s    instead of wind_m_s")
}
