package zones

import (
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestStaleETGraceAfterStart: a fresh state file has no valid ET yet, but
// the gateway has only just started: zone-et-stale waits until
// max_missing_hours (6 h by default) have passed since the start, then
// says how long the gateway has run without valid ET.
func TestStaleETGraceAfterStart(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 0, 0, 0, fernLoc)
	f := newFixture(t, testConfig(t, "row-a"), nil, start)
	for _, at := range []time.Duration{0, time.Second, 3 * time.Hour, 6 * time.Hour} {
		_, sends, err := f.svc.tick(start.Add(at))
		require.NoError(t, err)
		assert.Empty(t, sends, "no ET: the zone holds all the same")
		assert.Empty(t, f.eventsOf(EventAlert), "no alert %s after start", at)
	}
	_, _, err := f.svc.tick(start.Add(6*time.Hour + time.Minute))
	require.NoError(t, err)
	evs := f.eventsOf(EventAlert)
	require.Len(t, evs, 1)
	assert.Equal(t, "no valid ET since the gateway started 6.0 h ago, limit 6 h; zone holds", evs[0].Text)

	// A restart keeps the raised alert: no clear, no second raise.
	o := f.svc.o
	o.Registerer = prometheus.NewRegistry()
	svc2, err := New(o)
	require.NoError(t, err)
	f.svc = svc2
	_, _, err = f.svc.tick(start.Add(7 * time.Hour))
	require.NoError(t, err)
	assert.Len(t, f.eventsOf(EventAlert), 1, "still raised after a restart")
}

// TestStaleETGraceFromStateFile: a restart whose state file holds a valid
// ET from 2 h before raises the alert 6 h after that ET, not 6 h after the
// restart.
func TestStaleETGraceFromStateFile(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 0, 0, 0, fernLoc)
	f := newFixture(t, testConfig(t, "row-a"), nil, start)
	f.hour(t, record(start.Add(-3*time.Hour), 0.3, 0)) // ends 2 h before start
	_, _, err := f.svc.tick(start)
	require.NoError(t, err)
	assert.Empty(t, f.eventsOf(EventAlert))
	_, _, err = f.svc.tick(start.Add(4*time.Hour + time.Minute))
	require.NoError(t, err)
	evs := f.eventsOf(EventAlert)
	require.Len(t, evs, 1)
	assert.Contains(t, evs[0].Text, "no valid ET for 6.0 h")
}
