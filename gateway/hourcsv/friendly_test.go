package hourcsv

import (
	"bytes"
	"context"
	"errors"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/hourly"
)

// TestHeaderSemicolons: a spreadsheet export with ";" between the columns
// is named as such, with the fix, instead of one unknown column.
func TestHeaderSemicolons(t *testing.T) {
	src := "time;air_temp_c;rh_pct;wind_m_s;solar_w_m2\n2026-07-01T14:00;22,4;52;3,3;680\n"
	_, err := NewReader(strings.NewReader(src), Options{UTCOffset: 1})
	require.Error(t, err)
	assert.True(t, errors.Is(err, ErrHeader))
	assert.Contains(t, err.Error(), `line 1: the columns are separated by ";", not ","`)
	assert.Contains(t, err.Error(), `decimal commas (22,4)`)
	assert.NotContains(t, err.Error(), "unknown column")
}

// TestDecimalComma: "22,4" (quoted in a comma file) is named a decimal
// comma with the number it probably means; an unquoted one that splits the
// row in two says so too.
func TestDecimalComma(t *testing.T) {
	src := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n" +
		"2026-07-01T14:00,\"22,4\",52,3.3,680\n" +
		"2026-07-01T15:00,22,4,52,3.3,680\n"
	_, bad := readAll(t, src, Options{UTCOffset: 1})
	require.Len(t, bad, 2)
	assert.Equal(t, `line 2: column air_temp_c: value "22,4": not a number: a decimal comma; write 22.4 (a point is the decimal mark)`, bad[0].Error())
	assert.Equal(t, `line 3: has 6 fields, the header has 5: a decimal comma (22,4) splits a number in two; write 22.4 (a point is the decimal mark)`, bad[1].Error())
}

// TestUnitInValue: a unit typed into a cell is named, with the number alone
// as the fix.
func TestUnitInValue(t *testing.T) {
	src := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n2026-07-01T14:00,22.4 °C,52%,3.3,680\n"
	_, bad := readAll(t, src, Options{UTCOffset: 1})
	require.Len(t, bad, 1)
	assert.Equal(t, `line 2: column air_temp_c: value "22.4 °C": not a number: the unit "°C" is in the value; write 22.4 (the column name gives the unit)`, bad[0].Error())
}

// TestNumberHint is the hint the readers add to a cell that is not a number.
func TestNumberHint(t *testing.T) {
	for _, tc := range []struct{ in, fixed, why string }{
		{"22,4", "22.4", "decimal comma"},
		{"-0,5", "-0.5", "decimal comma"},
		{"22.4°C", "22.4", `unit "°C"`},
		{"3.3 m/s", "3.3", `unit "m/s"`},
		{"52%", "52", `unit "%"`},
		{"n/a", "", ""},
		{"9OO", "", ""},
		{"1013 hPa", "1013", `unit "hPa"`},
		{"1,234,5", "", ""},
	} {
		fixed, why := NumberHint(tc.in)
		assert.Equal(t, tc.fixed, fixed, tc.in)
		assert.Equal(t, tc.why, why, tc.in)
	}
}

// TestDaylightSavingHours: a logger keeping daylight-saving time skips the
// local hour 02:00 in spring and repeats 01:00 in autumn. Calc says so
// (every later hour is one hour off) instead of a bare "1 hour missing";
// the repeated hour names the clock change too.
func TestDaylightSavingHours(t *testing.T) {
	row := func(ts string) string { return ts + ",12,80,2,0\n" }
	head := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n"
	spring := head + row("2026-03-29T00:00") + row("2026-03-29T01:00") + row("2026-03-29T03:00") + row("2026-03-29T04:00")
	var out, rep bytes.Buffer
	_, err := Calc(context.Background(), strings.NewReader(spring), &out, CalcOptions{
		Station: hourly.Station{Latitude: 48, Longitude: 11, Elevation: 500, UTCOffset: 1}, Reference: hourly.Short, Report: &rep})
	require.NoError(t, err)
	assert.Contains(t, rep.String(), "line 4: 1 hour missing before 2026-03-29T03:00: the daylight-saving clock change? (one early-morning hour skipped in a month when clocks go forward) If the file is in daylight-saving time, every hour from here on is one hour off: give times in standard time (UTC+01:00) or RFC 3339 with their offset")

	autumn := head + row("2026-10-25T00:00") + row("2026-10-25T01:00") + row("2026-10-25T02:00") + row("2026-10-25T02:00") + row("2026-10-25T03:00")
	_, bad := readAll(t, autumn, Options{UTCOffset: 1})
	require.Len(t, bad, 1)
	assert.Contains(t, bad[0].Error(), "line 5: column time: value \"2026-10-25T02:00\": not after the previous hour 2026-10-25T02:00 (line 4): hours must be in increasing order without repeats; a repeated early-morning hour in a month when clocks go back is the daylight-saving clock change: give times in standard time (UTC+01:00) or RFC 3339 with their offset")

	// A gap at noon in July is an ordinary gap.
	rep.Reset()
	plain := head + row("2026-07-01T11:00") + row("2026-07-01T13:00")
	_, err = Calc(context.Background(), strings.NewReader(plain), &out, CalcOptions{
		Station: hourly.Station{Latitude: 48, Longitude: 11, Elevation: 500, UTCOffset: 1}, Reference: hourly.Short, Report: &rep})
	require.NoError(t, err)
	assert.Equal(t, "line 3: 1 hour missing before 2026-07-01T13:00\n", rep.String())
}
