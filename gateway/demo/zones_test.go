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
// the wheat paddock (sprinkler, three 40-minute cycles) are due in their
// evening windows. The correct forecast's 30 mm at 22:00-24:00 skips the
// apple block's evening run; the leak stops the wheat's first cycle and
// cancels its other two; the simulated valves report, and each run is
// credited once.
func TestDemoWatersZones(t *testing.T) {
	var out bytes.Buffer
	sum, err := Run(context.Background(), RunOptions{Days: 1, Seed: 1, Out: &out})
	require.NoError(t, err)
	text := out.String()
	// Every hour with valid ET steps both zones, and each step reaches the
	// local history through the outbox.
	assert.GreaterOrEqual(t, sum.ZoneSteps, 2*20, "zone steps in the local history")
	assert.Contains(t, text, "2026-01-12 20:00  zone apple-block-4 not watered: forecast issued 2026-01-12 12:00: 23.2 mm effective rain")
	assert.Equal(t, 1, strings.Count(text, "zone apple-block-4 not watered"), "the forecast skip is shown once")
	assert.NotContains(t, text, "apple-block-4 180 min from 2026-01-12 20:01")
	assert.Contains(t, text, "wheat-east 40 min from 2026-01-12 21:01 (cycle 1/3")
	assert.Regexp(t, `valve command wheat-east-\S+-c2 cancelled: flow alarm: meter creek-main`, text)
	assert.Regexp(t, `valve command wheat-east-\S+-c3 cancelled: flow alarm: meter creek-main`, text)

	minutes := map[string]float64{}
	for _, m := range regexp.MustCompile(`valve command (\S+): \S+ (\d+) min from`).FindAllStringSubmatch(text, -1) {
		minutes[m[1]], _ = strconv.ParseFloat(m[2], 64)
	}
	credit := regexp.MustCompile(`credited (\S+): ([0-9.]+) mm net from (\S+), depletion now ([0-9.]+) mm`)
	seen := map[string]bool{}
	for _, m := range credit.FindAllStringSubmatch(text, -1) {
		assert.False(t, seen[m[3]], "%s credited twice", m[3])
		seen[m[3]] = true
		mm, _ := strconv.ParseFloat(m[2], 64)
		stopped := strings.Contains(text, "valve stop for "+m[3]+" sent")
		switch {
		case stopped:
			// The leak's flow alarm stopped it after a few minutes.
			assert.Less(t, mm, 2.0, "%s stopped early", m[3])
		case m[1] == "wheat-east":
			// 40 min x 5 mm/h x 0.75 = 2.5 mm (60 x 12 L/min / (12 m x 12 m) = 5 mm/h).
			assert.InDelta(t, 2.5, mm, 0.05)
		default:
			// minutes x 1.333 mm/h x 0.9 (4 x 2 L/h / 6 m2 = 1.333 mm/h).
			assert.InDelta(t, minutes[m[3]]/60*4*2/6*0.9, mm, 0.05)
		}
	}
	// Every command sent is credited once, except a run still going when
	// the simulated day ends.
	assert.GreaterOrEqual(t, len(seen), len(minutes)-1)
	assert.NotEmpty(t, seen)
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
