package gateway_test

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"log/slog"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/demo"
	"etpulse/gateway/internal/testenv"
)

// TestEventLogLines runs a simulated day with a JSON logger at info level:
// every line parses as JSON, each committed hour record (first emission
// or revision) gives one "hour closed" line with its station, hour, ET,
// flags and revision, and each valve command one "command sent" line with
// its zone, id, minutes and the rule that made the zone due.
func TestEventLogLines(t *testing.T) {
	var logs testenv.Buffer
	log := slog.New(slog.NewJSONHandler(&logs, &slog.HandlerOptions{Level: slog.LevelInfo}))
	var table bytes.Buffer
	sum, err := demo.Run(context.Background(), demo.RunOptions{Days: 1, Seed: 1, Out: &table, Logger: log})
	require.NoError(t, err)

	hours, commands := 0, 0
	sc := bufio.NewScanner(strings.NewReader(logs.String()))
	sc.Buffer(make([]byte, 1<<20), 1<<20)
	for sc.Scan() {
		var m map[string]any
		require.NoError(t, json.Unmarshal(sc.Bytes(), &m), "not JSON: %s", sc.Text())
		switch m["msg"] {
		case "hour closed":
			hours++
			for _, k := range []string{"site", "station", "hour_start", "local_start", "reference", "complete", "revision", "flags"} {
				assert.Contains(t, m, k, sc.Text())
			}
			if m["complete"] == true {
				assert.Contains(t, m, "et_mm", sc.Text())
				// Rounded to 0.01 mm (gateway/internal/precision).
				et, _ := m["et_mm"].(float64)
				assert.InDelta(t, 0, et*100-float64(int64(et*100+0.5*sign(et))), 1e-6, "et_mm %v not rounded to 0.01", et)
			}
		case "command sent":
			commands++
			for _, k := range []string{"site", "zone", "id", "minutes", "start", "attempt", "basis", "depletion_mm", "trigger_mm"} {
				assert.Contains(t, m, k, sc.Text())
			}
		}
	}
	require.NoError(t, sc.Err())
	assert.Equal(t, sum.Records, hours, "one line per committed record (revisions included)")
	sent := strings.Count(table.String(), "  valve command ") - strings.Count(table.String(), " cancelled: ")
	require.Positive(t, sent, "the demo day sends valve commands:\n%s", table.String())
	assert.Equal(t, sent, commands, "one line per valve command the demo's table shows")
}

func sign(v float64) float64 {
	if v < 0 {
		return -1
	}
	return 1
}
