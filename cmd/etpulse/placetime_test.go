package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// placeTimeConfig is a one-station configuration (an invented farm) with the
// given longitude and UTC offset.
func placeTimeConfig(t *testing.T, lon, offset string) string {
	t.Helper()
	doc := `broker: {url: 'tcp://127.0.0.1:1883', client_id: etpulse-lowfield}
sites:
- id: lowfield
  stations:
  - id: mast
    latitude: 38.5
    longitude: ` + lon + `
    elevation_m: 20
    utc_offset_hours: ` + offset + `
    sensors:
    - {id: t, topic: lowfield/mast/t, format: number, quantity: air_temp, unit: degC}
    - {id: rh, topic: lowfield/mast/rh, format: number, quantity: rel_humidity, unit: '%'}
    - {id: u, topic: lowfield/mast/u, format: number, quantity: wind, unit: m/s}
    - {id: rs, topic: lowfield/mast/rs, format: number, quantity: solar, unit: W/m2}
`
	path := filepath.Join(t.TempDir(), "farm.yaml")
	require.NoError(t, os.WriteFile(path, []byte(doc), 0o600))
	return path
}

// TestCheckPlaceTime: a longitude whose sign was flipped, or a daylight-saving
// UTC offset, passes every range check; check warns with the fix that makes
// the pair plausible, and still exits 0.
func TestCheckPlaceTime(t *testing.T) {
	for _, tc := range []struct{ lon, offset, want string }{
		{"121.74", "-8", "warning: sites[0].stations[0].longitude: longitude 121.74 with utc_offset_hours -8 is 118.3° from that offset's meridian (-120°): did you mean -121.74? (east positive; a station really at 121.74 has a standard offset near 8)"},
		{"-121.74", "-7", "warning: sites[0].stations[0].utc_offset_hours: utc_offset_hours -7 is one hour ahead of -8, the standard offset nearest longitude -121.74: if -7 is the daylight-saving (summer) offset, use the standard offset -8"},
		{"-121.74", "8", "warning: sites[0].stations[0].longitude: longitude -121.74 with utc_offset_hours 8 is 118.3° from that offset's meridian (120°): did you mean 121.74? (east positive; a station really at -121.74 has a standard offset near -8)"},
		{"87.6", "3", "warning: sites[0].stations[0].utc_offset_hours: utc_offset_hours 3 with longitude 87.6 is 42.6° from that offset's meridian (45°); the whole-hour offset nearest that longitude is 6: check both"},
	} {
		code, _, errs := runCmd(t, "check", "--config", placeTimeConfig(t, tc.lon, tc.offset))
		assert.Equal(t, 0, code, errs)
		assert.Contains(t, errs, tc.want, "longitude %s, offset %s", tc.lon, tc.offset)
	}
	// Plausible pairs give no such warning.
	for _, pair := range [][2]string{{"-121.74", "-8"}, {"14.06", "1"}, {"142.21", "10"}, {"179.9", "-12"}, {"-112", "-7"}, {"77.2", "5.5"}} {
		_, _, errs := runCmd(t, "check", "--config", placeTimeConfig(t, pair[0], pair[1]))
		assert.False(t, strings.Contains(errs, "longitude") || strings.Contains(errs, "utc_offset_hours"), "%v: %s", pair, errs)
	}
}

// TestCalcPlaceTime: calc warns about a flipped longitude on stderr, naming
// its own flags, and still computes (the station might really be there).
func TestCalcPlaceTime(t *testing.T) {
	args := []string{"--in", demoFile, "--lat", "37.48", "--lon", "121.74", "--elevation", "310", "--utc-offset", "-8", "--wind-height", "3"}
	code, out, errs := calc(t, "", args...)
	require.Equal(t, exitOK, code, errs)
	assert.NotEmpty(t, out)
	assert.Contains(t, errs, "etpulse calc: warning: --lon 121.74 with --utc-offset -8 is 118.3° from that offset's meridian (-120°): did you mean -121.74?")
	// Near the prime meridian a flipped sign stays within 30° of the
	// meridian and cannot be told from a real place: no warning.
	code, _, errs = calc(t, "", "--in", demoFile, "--lat", "37.48", "--lon", "-14.06", "--elevation", "310", "--utc-offset", "1", "--wind-height", "3")
	require.Equal(t, exitOK, code, errs)
	assert.NotContains(t, errs, "warning")
}

// TestReplayUnitInValue: a unit typed into a replay value ("22.4 °C") is
// named, with the number alone for value and the unit's name for the unit
// column; the row is skipped and the others still run.
func TestReplayUnitInValue(t *testing.T) {
	dir := t.TempDir()
	in := filepath.Join(dir, "readings.csv")
	require.NoError(t, os.WriteFile(in, []byte("time,station,quantity,value,unit\n"+
		"2026-07-14T00:00:00Z,mast,air_temp,22.4 °C,degC\n"+
		"2026-07-14T00:01:00Z,mast,air_temp,\"22,5\",degC\n"+
		"2026-07-14T00:02:00Z,mast,air_temp,22.6,degC\n"), 0o600))
	code, _, errs := runCmd(t, "replay", "--config", placeTimeConfig(t, "-121.74", "-8"), "--in", in)
	require.Equal(t, exitOK, code, errs)
	assert.Contains(t, errs, `value: "22.4 °C" is not a number: the unit "°C" is in the value; write 22.4 (the unit goes in the unit column: degC)`)
	assert.Contains(t, errs, `value: "22,5" is not a number: a decimal comma; write 22.5 (a point is the decimal mark)`)
	assert.Contains(t, errs, "3 rows (2 bad")
}
