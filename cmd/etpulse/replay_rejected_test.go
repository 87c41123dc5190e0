package main

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestReplaySummaryCountsRejected: a reading the pipeline refuses (here one
// that arrives after its hour closed and the late window passed, as rows out
// of time order do) is counted by reason in the summary line, not only
// logged row by row. (The 01:05 row closes the station's first hour: a
// station that has closed nothing keeps at most the late window open.)
func TestReplaySummaryCountsRejected(t *testing.T) {
	in := filepath.Join(t.TempDir(), "readings.csv")
	require.NoError(t, os.WriteFile(in, []byte("time,station,quantity,value,unit\n"+
		"2026-07-14T00:00:00Z,mast,air_temp,20,degC\n"+
		"2026-07-14T01:05:00Z,mast,air_temp,20,degC\n"+
		"2026-07-15T12:00:00Z,mast,air_temp,21,degC\n"+
		"2026-07-14T00:05:00Z,mast,air_temp,20,degC\n"), 0o644))
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"replay", "--config", "../../testdata/config/minimal.yaml", "--in", in}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, errOut.String())
	assert.Regexp(t, `level=WARN msg="reading rejected" site=lowfield station=mast .*reason=too_old err=".*air_temp reading at 2026-07-14T00:05:00Z`, errOut.String())
	assert.Contains(t, errOut.String(), "4 rows (0 bad, 0 duplicate), 3 readings stored")
	assert.Contains(t, errOut.String(), "; 1 reading rejected (too_old 1)\n")
}

// TestReplayRejectedLogRateLimited: rejected readings are logged the way the
// live gateway logs them, a few per reason and minute; the summary line
// still counts every one.
func TestReplayRejectedLogRateLimited(t *testing.T) {
	var rows strings.Builder
	rows.WriteString("time,station,quantity,value,unit\n")
	rows.WriteString("2026-07-14T00:00:00Z,mast,air_temp,20,degC\n")
	rows.WriteString("2026-07-14T01:05:00Z,mast,air_temp,20,degC\n")
	rows.WriteString("2026-07-15T12:00:00Z,mast,air_temp,21,degC\n")
	for i := range 12 {
		fmt.Fprintf(&rows, "2026-07-14T00:%02d:00Z,mast,air_temp,20,degC\n", i+1)
	}
	in := filepath.Join(t.TempDir(), "readings.csv")
	require.NoError(t, os.WriteFile(in, []byte(rows.String()), 0o644))
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"replay", "--config", "../../testdata/config/minimal.yaml", "--in", in}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, errOut.String())
	text := errOut.String()
	assert.Equal(t, 5, strings.Count(text, `msg="reading rejected"`), "the first 5 of the minute: %s", text)
	assert.Contains(t, text, "00:05:00Z", "the 5th is logged")
	assert.NotContains(t, text, "00:06:00Z", "the 6th is not")
	assert.Contains(t, text, "; 12 readings rejected (too_old 12)\n")
}

// TestReplayUnsetClockRowBounded: a row stamped at the Unix epoch plus one
// second (a device whose clock was never set) before a station's real rows
// does not make replay close every hour since 1970: it is dropped as too_old
// when the next row comes (stored first, so counted both as stored and as
// rejected), and replay ends at once with the real hours.
func TestReplayUnsetClockRowBounded(t *testing.T) {
	var rows strings.Builder
	rows.WriteString("time,station,quantity,value,unit\n")
	rows.WriteString("1970-01-01T00:00:01Z,mast,air_temp,20,degC\n")
	for i := range 30 {
		fmt.Fprintf(&rows, "2026-07-14T%02d:%02d:00Z,mast,air_temp,20,degC\n", i/12, i%12*5)
	}
	in := filepath.Join(t.TempDir(), "readings.csv")
	require.NoError(t, os.WriteFile(in, []byte(rows.String()), 0o644))
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"replay", "--config", "../../testdata/config/minimal.yaml", "--in", in}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, errOut.String())
	assert.Contains(t, errOut.String(), "31 rows (0 bad, 0 duplicate), 31 readings stored, 3 hourly records")
	assert.Contains(t, errOut.String(), "; 1 reading rejected (too_old 1)\n")
	assert.Contains(t, errOut.String(), "check the device clock")
}
