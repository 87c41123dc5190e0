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

// TestReplayFlippedLongitude replays two days of the invented farm's
// paddock station through a configuration whose longitude has its sign
// flipped (-146.7 instead of 146.7, UTC+10): replay warns about the place
// and time before it starts, and the solar alerts raised on the way name
// the station longitude or UTC offset as the likely cause.
func TestReplayFlippedLongitude(t *testing.T) {
	dir := t.TempDir()
	sim := demo.New(demo.Options{Seed: 2, Stations: []string{demo.Paddock}, DupRate: -1, LateRate: -1, BadRate: -1, ShuffleRate: -1})
	doc := sim.ConfigYAML(demo.ConfigOptions{BrokerURL: "tcp://127.0.0.1:1883", ClientID: "replay-flip", StatePath: filepath.Join(dir, "unused.db")})
	require.Contains(t, doc, "longitude: 146.7\n")
	doc = strings.ReplaceAll(doc, "longitude: 146.7\n", "longitude: -146.7\n")
	cfgPath := filepath.Join(dir, "farm.yaml")
	require.NoError(t, os.WriteFile(cfgPath, []byte(doc), 0o600))
	var b strings.Builder
	require.NoError(t, demo.WriteReadingsCSV(&b, sim.Generate(sim.Start(), sim.Start().Add(50*time.Hour))))
	inPath := filepath.Join(dir, "readings.csv")
	require.NoError(t, os.WriteFile(inPath, []byte(b.String()), 0o600))

	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"replay", "--config", cfgPath, "--in", inPath}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, errOut.String())
	assert.Contains(t, errOut.String(), "etpulse replay: warning: sites[0].stations[0].longitude: longitude -146.7 with utc_offset_hours 10 is ")
	assert.Contains(t, errOut.String(), "did you mean 146.7?")
	assert.Contains(t, errOut.String(), "likely cause the station longitude or UTC offset")
}
