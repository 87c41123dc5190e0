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

	"etpulse/gateway/config"
)

// readmeBlocks returns the fenced code blocks of README.md whose info
// string is info ("yaml", or "" for plain blocks).
func readmeBlocks(t *testing.T, info string) []string {
	t.Helper()
	text, err := os.ReadFile("../../README.md")
	require.NoError(t, err)
	var out []string
	var block *strings.Builder
	keep := false
	for _, line := range strings.Split(string(text), "\n") {
		switch {
		case block == nil && strings.HasPrefix(line, "```"):
			block, keep = &strings.Builder{}, strings.TrimPrefix(line, "```") == info
		case block != nil && line == "```":
			if keep {
				out = append(out, block.String())
			}
			block = nil
		case block != nil:
			block.WriteString(line + "\n")
		}
	}
	return out
}

// TestReadmeConfigurationsLoad: every complete configuration shown in
// README.md (a yaml block with sites) loads and validates, and the readings
// CSV example replays through it without a bad or rejected row.
func TestReadmeConfigurationsLoad(t *testing.T) {
	dir := t.TempDir()
	var configs []string
	for i, block := range readmeBlocks(t, "yaml") {
		if !strings.Contains(block, "\nsites:") && !strings.HasPrefix(block, "sites:") {
			continue
		}
		path := filepath.Join(dir, fmt.Sprintf("readme-%d.yaml", i))
		require.NoError(t, os.WriteFile(path, []byte(block), 0o644))
		_, err := config.Load(path)
		require.NoError(t, err, "README yaml block:\n%s", block)
		configs = append(configs, path)
	}
	require.NotEmpty(t, configs, "README shows a complete configuration")

	var csv string
	for _, block := range readmeBlocks(t, "") {
		if strings.HasPrefix(block, "time,station,quantity,value,unit\n") {
			csv = block
		}
	}
	require.NotEmpty(t, csv, "README shows a readings CSV")
	in := filepath.Join(dir, "readings.csv")
	require.NoError(t, os.WriteFile(in, []byte(csv), 0o644))
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"replay", "--config", configs[0], "--in", in}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, errOut.String())
	rows := strings.Count(csv, "\n") - 1
	assert.Contains(t, errOut.String(), fmt.Sprintf("%d rows (0 bad, 0 duplicate), %d readings stored", rows, rows))
	assert.NotContains(t, errOut.String(), "rejected")
	assert.True(t, strings.HasPrefix(out.String(), "site,station,reference,start_utc,"), out.String())
}
