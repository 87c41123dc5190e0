package demo

import (
	"bytes"
	"context"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestDemoShowsDriftAlert runs one simulated day with the injected
// pyranometer drift and checks that the alert is raised during the first
// night, with its evidence, and that the following orchard hours are flagged.
func TestDemoShowsDriftAlert(t *testing.T) {
	var out bytes.Buffer
	_, err := Run(context.Background(), RunOptions{
		Days: 1, Seed: 1, Out: &out,
		Faults: DriftFaults(DefaultStart), Setup: ShowAlerts,
	})
	require.NoError(t, err)
	text := out.String()
	require.Contains(t, text, "alert raised: orchard hourly/solar night-solar (warning): solar ")
	assert.Contains(t, text, "expected <= 10 W/m2")

	after := text[strings.Index(text, "night-solar (warning)"):]
	flagged := 0
	for _, line := range strings.Split(after, "\n") {
		if strings.HasPrefix(line, "orchard ") && strings.Contains(line, "alert:night-solar:solar") {
			flagged++
		}
	}
	assert.Positive(t, flagged, "orchard hours after the alert carry its flag")
	for _, line := range strings.Split(text, "\n") {
		if strings.HasPrefix(line, "paddock ") || strings.HasPrefix(line, "glasshouse ") {
			assert.NotContains(t, line, "night-solar", "only the drifting station is flagged")
		}
	}
}
