package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestDemoOneDay runs `etpulse demo --days 1` and checks its table for sane
// values. The bounds are plausible ranges for an invented summer day, common
// practice, no source.
func TestDemoOneDay(t *testing.T) {
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"demo", "--days", "1", "--seed", "3"}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, "stderr: %s", errOut.String())
	text := out.String()
	t.Log(text[max(0, len(text)-600):])

	row := regexp.MustCompile(`^(orchard|paddock|glasshouse)\s+(\d{4}-\d\d-\d\d \d\d:00)\s+(\S+)\s+(\S+)\s+(\S+)\s+(\S+)\s+(\S+)\s+(\S+)\s+(\S+)\s*(.*)$`)
	first := map[string]int{}
	for _, line := range strings.Split(text, "\n") {
		m := row.FindStringSubmatch(line)
		if m == nil {
			continue
		}
		if !strings.Contains(m[10], "revision") {
			first[m[1]]++
		}
		num := func(i int) float64 {
			v, err := strconv.ParseFloat(m[i], 64)
			require.NoError(t, err, "column %d of %q", i, line)
			return v
		}
		if m[3] == "-" || m[9] == "-" {
			continue // incomplete hour: no ET
		}
		assert.InDelta(t, 22, num(3), 18, "air temperature in %q", line)
		assert.InDelta(t, 50, num(4), 50, "RH in %q", line)
		assert.InDelta(t, 3, num(5), 4, "wind in %q", line)
		assert.InDelta(t, 1.8, num(6), 2, "Rs in %q", line)
		assert.InDelta(t, 0.6, num(9), 0.9, "hourly ET in %q", line)
	}
	for _, st := range []string{"orchard", "paddock", "glasshouse"} {
		assert.Equal(t, 24, first[st], "%s: one first record per hour", st)
	}
	total := regexp.MustCompile(`daily total\s+(\S+)\s+\S+\s+ET\S*\s+([0-9.]+) mm`)
	totals := total.FindAllStringSubmatch(text, -1)
	require.Len(t, totals, 3)
	for _, m := range totals {
		v, err := strconv.ParseFloat(m[2], 64)
		require.NoError(t, err)
		assert.InDelta(t, 6, v, 5, "daily ET of %s", m[1])
	}
	assert.Regexp(t, `messages \d+ \(duplicates [1-9]\d*, late [1-9]\d*, malformed [1-9]\d*\); rejected: .*unparseable [1-9]`, text)
	assert.Regexp(t, `revisions [1-9]`, text)
}

// TestDemoSameSeedSameTable runs `etpulse demo --days 1 --seed 3` three
// times: the output is byte for byte the same apart from the wall time of
// the summary line, zone events included (their minutes once depended on
// how fast the scheduler woke).
func TestDemoSameSeedSameTable(t *testing.T) {
	wall := regexp.MustCompile(`wall time \S+`)
	var first string
	for i := range 3 {
		var out, errOut bytes.Buffer
		code := run(context.Background(), []string{"demo", "--days", "1", "--seed", "3"}, nil, &out, &errOut)
		require.Equal(t, exitOK, code, "run %d stderr: %s", i+1, errOut.String())
		require.Regexp(t, wall, out.String(), "run %d", i+1)
		text := wall.ReplaceAllString(out.String(), "wall time X")
		require.Contains(t, text, "valve command ", "run %d: the table shows zone events", i+1)
		if i == 0 {
			first = text
			continue
		}
		require.Equal(t, first, text, "run %d differs from run 1", i+1)
	}
}

// TestDemoErrorOnePrefix: a failing demo names the command once.
func TestDemoErrorOnePrefix(t *testing.T) {
	path := filepath.Join(t.TempDir(), "taken.db")
	require.NoError(t, os.WriteFile(path, nil, 0o600))
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"demo", "--state", path}, nil, &out, &errOut)
	require.Equal(t, exitError, code)
	assert.Equal(t, "etpulse demo: state file "+path+" already exists: give a new path (the demo starts from an empty state)\n", errOut.String())
}
