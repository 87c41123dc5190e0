package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/demo"
)

func TestReplayCommand(t *testing.T) {
	dir := t.TempDir()
	sim := demo.New(demo.Options{Seed: 2, Stations: []string{demo.Paddock}})
	cfgPath := filepath.Join(dir, "farm.yaml")
	require.NoError(t, os.WriteFile(cfgPath, []byte(sim.ConfigYAML(demo.ConfigOptions{
		BrokerURL: "tcp://127.0.0.1:1883", ClientID: "replay-cmd", StatePath: filepath.Join(dir, "unused.db"),
	})), 0o600))
	var b strings.Builder
	require.NoError(t, demo.WriteReadingsCSV(&b, sim.Generate(sim.Start(), sim.Start().Add(3*time.Hour))))
	inPath := filepath.Join(dir, "readings.csv")
	require.NoError(t, os.WriteFile(inPath, []byte(b.String()), 0o600))

	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"replay", "--config", cfgPath, "--in", inPath}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, errOut.String())
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	require.Len(t, lines, 4, out.String())
	assert.True(t, strings.HasPrefix(lines[0], "site,station,reference,start_utc"))
	assert.Contains(t, lines[1], "tallowwood,paddock,short,2026-01-11T14:00:00Z")
	assert.Contains(t, errOut.String(), "3 hourly records (3 complete first records, 0 revisions)")

	code = run(context.Background(), []string{"replay", "--config", cfgPath}, nil, &out, &errOut)
	assert.Equal(t, exitUsage, code)
}
