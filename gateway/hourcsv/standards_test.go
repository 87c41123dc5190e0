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

// TestCalcCarryRuleAsLive: calc passes the carry on across gaps and lets
// hourly.CarryUsable decide, as the live pipeline does: a night gap keeps
// the evening's value, a gap that missed a sunny hour does not. Each hour
// equals hourly.Compute fed the previous hour's carry.
func TestCalcCarryRuleAsLive(t *testing.T) {
	st := demoStation
	st.MinWind2 = hourly.DefaultMinWind2
	rows := []string{
		"2026-07-14T16:00,30,40,2,600", // last sunny hour of the evening (sun about 0.5 rad)
		"2026-07-14T17:00,29,42,2,400",
		"2026-07-14T18:00,28,45,2,200",
		"2026-07-14T19:00,26,50,2,50",
		"2026-07-14T20:00,24,55,2,0",
		// 21:00-22:00 missing: a night gap, nothing sunny was missed
		"2026-07-14T23:00,22,60,0.2,0", // calm: u2 raised to 0.5 m/s
		// 2026-07-15 missing entirely: its sunny hours were missed
		"2026-07-16T02:00,20,70,1,0",
	}
	in := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n" + strings.Join(rows, "\n") + "\n"
	var out, report bytes.Buffer
	sum, err := Calc(context.Background(), strings.NewReader(in), &out, CalcOptions{Station: st, Reference: hourly.Short, Report: &report})
	require.NoError(t, err)
	assert.Equal(t, 2, sum.Gaps)
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	require.Len(t, lines, len(rows)+1)
	assert.Equal(t, "flags", HourColumns[len(HourColumns)-1])

	rd, err := NewReader(strings.NewReader(in), Options{UTCOffset: st.UTCOffset})
	require.NoError(t, err)
	var carry hourly.Carry
	var sources []hourly.FcdSource
	for i := range rows {
		row, err := rd.Read()
		require.NoError(t, err)
		res, next, err := hourly.Compute(st.Prepared(), hourly.Short, row.Hour, carry)
		require.NoError(t, err)
		carry = next
		sources = append(sources, res.FcdSource)
		var want bytes.Buffer
		hw := NewHourWriter(&want)
		require.NoError(t, hw.Write(row.Hour.Start, &res))
		require.NoError(t, hw.Flush())
		assert.Equal(t, strings.TrimSpace(want.String()), lines[i+1], rows[i])
	}
	assert.Equal(t, hourly.FcdCarried, sources[5], "a night gap keeps the carry")
	assert.Equal(t, hourly.FcdDefault, sources[6], "a missed day ends it")
	assert.True(t, strings.HasSuffix(lines[6], ","+hourly.FlagWindFloor), lines[6])
	assert.True(t, strings.HasSuffix(lines[7], ","+hourly.FlagFcdDefault+" "+hourly.FlagFcdExpired), lines[7])
	assert.Contains(t, report.String(), "line 7: 2 hours missing before 2026-07-14T23:00\n")
}
