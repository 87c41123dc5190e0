package hourcsv

import (
	"bytes"
	"context"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/hourly"
)

var demoStation = hourly.Station{Latitude: 37.48, Longitude: 14.06, Elevation: 310, UTCOffset: 1}

func TestCalcDailyPartialDay(t *testing.T) {
	// Two hours of one day and one hour of the next: no daily-equation value
	// for incomplete days, rain empty where no hour had a rain value.
	in := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2,rain_mm\n" +
		"2026-07-14T11:00,30,40,2,900,1.5\n" +
		"2026-07-14T12:00,31,38,2,950,0.5\n" +
		"2026-07-15T12:00,31,38,2,950,\n"
	var out, report bytes.Buffer
	sum, err := Calc(context.Background(), strings.NewReader(in), &out, CalcOptions{
		Station: demoStation, Reference: hourly.Short, Daily: true, Report: &report})
	require.NoError(t, err)
	assert.Equal(t, Summary{Hours: 3, Days: 2, Gaps: 1}, sum)
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	require.Len(t, lines, 3)
	assert.Equal(t, strings.Join(DayColumns, ","), lines[0])
	assert.True(t, strings.HasPrefix(lines[1], "2026-07-14,2,"), lines[1])
	f := strings.Split(lines[1], ",")
	assert.Equal(t, "", f[3], "no daily-equation value for a 2-hour day")
	assert.Equal(t, "2.00", f[4], "rain summed")
	f = strings.Split(lines[2], ",")
	assert.Equal(t, "2026-07-15", f[0])
	assert.Equal(t, "", f[4], "no rain value that day")
	assert.Equal(t, "line 4: 23 hours missing before 2026-07-15T12:00\n", report.String())
}

func TestCalcCancelled(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	var out bytes.Buffer
	_, err := Calc(ctx, bytes.NewReader(SyntheticYears(2026, 1)), &out, CalcOptions{Station: demoStation, Reference: hourly.Short})
	require.ErrorIs(t, err, context.Canceled)
	assert.Equal(t, strings.Join(HourColumns, ",")+"\n", out.String(), "header flushed, no hour computed")
}

func TestCalcConfigErrors(t *testing.T) {
	_, err := Calc(context.Background(), strings.NewReader(""), &bytes.Buffer{}, CalcOptions{Station: hourly.Station{Latitude: 95}, Reference: hourly.Short})
	require.ErrorIs(t, err, hourly.ErrConfig)
	_, err = Calc(context.Background(), strings.NewReader(""), &bytes.Buffer{}, CalcOptions{Station: demoStation, Reference: "grass"})
	require.ErrorIs(t, err, hourly.ErrConfig)
}

// TestCalcSyntheticYear runs a whole generated year: every hour computes,
// nothing is reported, and the daily sums stay physically sensible.
func TestCalcSyntheticYear(t *testing.T) {
	var out, report bytes.Buffer
	sum, err := Calc(context.Background(), bytes.NewReader(SyntheticYears(2026, 1)), &out, CalcOptions{
		Station: demoStation, Reference: hourly.Short, Daily: true, Report: &report})
	require.NoError(t, err)
	assert.Equal(t, Summary{Hours: 8760, Days: 365}, sum)
	assert.Empty(t, report.String())
	for _, line := range strings.Split(strings.TrimSpace(out.String()), "\n")[1:] {
		f := strings.Split(line, ",")
		require.Len(t, f, len(DayColumns))
		assert.NotEmpty(t, f[3], "daily-equation value for a full day: %s", line)
	}
}
