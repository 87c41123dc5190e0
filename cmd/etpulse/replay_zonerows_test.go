package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestReplayZoneRowsCommand: replay passes meter and forecast rows to the
// zone backtest; a bad one is reported on stderr with its line and the
// replay goes on.
func TestReplayZoneRowsCommand(t *testing.T) {
	dir := t.TempDir()
	farm, err := os.ReadFile(filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml"))
	require.NoError(t, err)
	cfgPath := filepath.Join(dir, "farm.yaml")
	farm = append(farm, "  meters:\n  - {id: pear-meter, zone: pear-block-2}\n"...)
	require.NoError(t, os.WriteFile(cfgPath, farm, 0o600))
	in := strings.Join([]string{
		"time,station,quantity,value,unit",
		"2026-07-01T10:00:00Z,mast,air_temp,20,degC",
		"2026-07-01T10:06:00Z,pear-meter,meter_flow,120,L/min",
		`2026-07-01T10:09:00Z,brackenby,forecast,"{""issued"":""2026-07-01T09:00:00Z"",""periods"":[{""start"":""2026-07-02T00:00:00Z"",""end"":""2026-07-02T06:00:00Z"",""rain_mm"":12}]}",`,
		"2026-07-01T10:10:00Z,pear-meter,meter_total,-1,L",
		"2026-07-01T10:11:00Z,mast,air_temp,21,degC",
	}, "\n") + "\n"
	inPath := filepath.Join(dir, "readings.csv")
	require.NoError(t, os.WriteFile(inPath, []byte(in), 0o600))

	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"replay", "--config", cfgPath, "--in", inPath, "--summary"}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, errOut.String())
	assert.Contains(t, errOut.String(), "line 5: meter_total: value -1 must be >= 0")
	assert.Contains(t, errOut.String(), "5 rows (1 bad, 0 duplicate)")
	assert.NotContains(t, errOut.String(), "need a zone backtest")
}
