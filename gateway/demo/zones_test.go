package demo

import (
	"bytes"
	"context"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestDemoWatersZones runs one simulated day: the apple block (drip) and
// the wheat paddock (sprinkler, three 40-minute cycles) are commanded in
// their evening windows, the simulated valves report, and each run is
// credited once: depletions fall back.
func TestDemoWatersZones(t *testing.T) {
	var out bytes.Buffer
	sum, err := Run(context.Background(), RunOptions{Days: 1, Seed: 1, Out: &out})
	require.NoError(t, err)
	text := out.String()
	// Every hour with valid ET steps both zones, and each step reaches the
	// local history through the outbox.
	assert.GreaterOrEqual(t, sum.ZoneSteps, 2*20, "zone steps in the local history")
	commands := strings.Count(text, "valve command ") - strings.Count(text, " re-sent ")
	assert.Equal(t, 4, commands, text)
	assert.Contains(t, text, "apple-block-4 180 min from 2026-01-12 20:01 (cycle 1/1")
	assert.Contains(t, text, "wheat-east 40 min from 2026-01-12 21:01 (cycle 1/3")

	credit := regexp.MustCompile(`credited (\S+): ([0-9.]+) mm net from (\S+), depletion now ([0-9.]+) mm`)
	seen := map[string]bool{}
	var last = map[string]float64{}
	for _, m := range credit.FindAllStringSubmatch(text, -1) {
		assert.False(t, seen[m[3]], "%s credited twice", m[3])
		seen[m[3]] = true
		mm, _ := strconv.ParseFloat(m[2], 64)
		dep, _ := strconv.ParseFloat(m[4], 64)
		stopped := strings.Contains(text, "valve stop for "+m[3]+" sent")
		switch {
		case stopped:
			// The leak's flow alarm stopped it after a few minutes.
			assert.Less(t, mm, 2.0, "%s stopped early", m[3])
		case m[1] == "wheat-east":
			// 40 min x 5 mm/h x 0.75 = 2.5 mm (60 x 12 L/min / (12 m x 12 m) = 5 mm/h).
			assert.InDelta(t, 2.5, mm, 0.05)
		default:
			// 180 min x 1.333 mm/h x 0.9 = 3.6 mm (4 x 2 L/h / 6 m2 = 1.333 mm/h).
			assert.InDelta(t, 3.6, mm, 0.05)
		}
		last[m[1]] = dep
	}
	assert.Len(t, seen, 4)
	assert.Less(t, last["wheat-east"], 20.0, "below its trigger after the night's cycles")
	assert.Less(t, last["apple-block-4"], 8.0)
}

// TestDemoFieldSensors: the demo's probe, flow meter and forecast feed each
// show in the table, and the leak's flow alarm stops the wheat's first run
// (the meter's stop_on_high).
func TestDemoFieldSensors(t *testing.T) {
	var out bytes.Buffer
	_, err := Run(context.Background(), RunOptions{Days: 1, Seed: 1, Out: &out})
	require.NoError(t, err)
	text := out.String()
	assert.Contains(t, text, "soil-moisture probe sm30 at 0.3 m in apple-block-4")
	assert.Contains(t, text, "a wrong forecast")
	assert.Contains(t, text, "a correct forecast")
	assert.Regexp(t, `flow meter creek-main: a lateral bursts during wheat-east's run (\S+)`, text)
	assert.Contains(t, text, "zone creek-main: flow alarm: meter creek-main")
	assert.Regexp(t, `valve stop for wheat-east-\S+-c1 sent \(attempt 1\): flow alarm`, text)
	assert.NotContains(t, text, "sm30/soil_water range", "the probe's readings are in range")
}
