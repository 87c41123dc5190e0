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

// TestDemoKeepsStateForExport follows the README: `etpulse demo --state
// FILE` keeps the state file and prints the export command, and that
// command prints the demo's local history.
func TestDemoKeepsStateForExport(t *testing.T) {
	path := filepath.Join(t.TempDir(), "demo.db")
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"demo", "--days", "1", "--state", path}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, "stderr: %s", errOut.String())
	m := regexp.MustCompile(`history: (\d+) hourly records and (\d+) zone steps kept in .*\n  (etpulse export .*)\n`).FindStringSubmatch(out.String())
	require.NotNil(t, m, out.String()[max(0, out.Len()-400):])
	assert.Equal(t, "72", m[1], "3 stations x 24 hours")
	_, err := os.Stat(path)
	require.NoError(t, err, "the state file is kept")

	args := strings.Fields(m[3])[1:]
	out.Reset()
	errOut.Reset()
	require.Equal(t, exitOK, run(context.Background(), args, nil, &out, &errOut), "%v: %s", args, errOut.String())
	counts := map[string]int{}
	for _, line := range strings.Split(strings.TrimSpace(out.String()), "\n")[1:] {
		counts[strings.Split(line, ",")[1]]++
	}
	assert.Equal(t, 72, counts["et_hour"], "hourly records exported")
	assert.Equal(t, m[2], strconv.Itoa(counts["zone_step"]), "zone steps exported")

	// A second demo never reuses a state file.
	out.Reset()
	errOut.Reset()
	code = run(context.Background(), []string{"demo", "--state", path}, nil, &out, &errOut)
	assert.Equal(t, exitError, code)
	assert.Contains(t, errOut.String(), "already exists")
}
