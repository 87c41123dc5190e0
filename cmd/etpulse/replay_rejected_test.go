package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestReplaySummaryCountsRejected: a reading the pipeline refuses (here one
// that arrives after its hour closed and the late window passed, as rows out
// of time order do) is counted by reason in the summary line, not only
// logged row by row.
func TestReplaySummaryCountsRejected(t *testing.T) {
	in := filepath.Join(t.TempDir(), "readings.csv")
	require.NoError(t, os.WriteFile(in, []byte("time,station,quantity,value,unit\n"+
		"2026-07-14T00:00:00Z,mast,air_temp,20,degC\n"+
		"2026-07-15T12:00:00Z,mast,air_temp,21,degC\n"+
		"2026-07-14T00:05:00Z,mast,air_temp,20,degC\n"), 0o644))
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"replay", "--config", "../../testdata/config/minimal.yaml", "--in", in}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, errOut.String())
	assert.Contains(t, errOut.String(), "rejected too_old reading: air_temp reading at 2026-07-14T00:05:00Z")
	assert.Contains(t, errOut.String(), "3 rows (0 bad, 0 duplicate), 2 readings stored")
	assert.Contains(t, errOut.String(), "; 1 readings rejected (too_old 1)\n")
}
