package zones

import (
	"encoding/json"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
	"etpulse/gateway/clock"
)

// Commands planned before a restart are checked against the configuration
// the gateway restarts with before their first send: a planned run longer
// than a lowered max_minutes, or one for a valve since moved, is never
// sent; the zone is planned again under the new configuration.
func TestConfigChangedAfterRestartBeforeSend(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, start)
	f.hour(t, record(start.Truncate(time.Hour).Add(-time.Hour), 0.5, 0))
	_, sends, err := f.svc.tick(start) // three 240-minute runs planned for 10:02
	require.NoError(t, err)
	require.Empty(t, sends)

	// Restart with row-a capped at 60 minutes and row-b wired to valve v9.
	cfg := testConfig(t)
	cfg.Sites[0].Zones[0].System.MaxMinutes = 60
	cfg.Sites[0].Zones[1].Valve = "v9"
	f.svc, err = New(Options{Config: cfg, DB: f.db, Store: f.out, Registerer: prometheus.NewRegistry(), Clock: clock.Func(f.clock.Now),
		OnEvent: func(e Event) { f.mu.Lock(); f.events = append(f.events, e); f.mu.Unlock() }})
	require.NoError(t, err)

	now := start.Add(31 * time.Second) // the planned start - lead
	next, sends, err := f.svc.tick(now)
	require.NoError(t, err)
	sent := map[string]CommandMessage{}
	for _, o := range sends {
		var m CommandMessage
		require.NoError(t, json.Unmarshal(o.payload, &m))
		sent[m.Zone] = m
	}
	require.Contains(t, sent, "row-c", "unchanged zone: sent as planned")
	assert.Equal(t, 240, sent["row-c"].Minutes)
	assert.NotContains(t, sent, "row-a", "240 minutes would break the new 60-minute cap")
	assert.NotContains(t, sent, "row-b", "planned for the valve the zone no longer drives")
	led, err := f.svc.Ledger("fernhill")
	require.NoError(t, err)
	for _, c := range led {
		if c.Zone != "row-c" {
			assert.Equal(t, controllers.Cancelled, c.State, c.ID)
			assert.NotEmpty(t, c.Note)
		}
	}
	assert.False(t, next.After(now.Add(time.Second)), "re-planned at once, next tick %v", next)

	// The next pass plans both again under the new configuration.
	now = next
	_, _, err = f.svc.tick(now)
	require.NoError(t, err)
	_, sends, err = f.svc.tick(now.Add(time.Minute))
	require.NoError(t, err)
	sent = map[string]CommandMessage{}
	for _, o := range sends {
		var m CommandMessage
		require.NoError(t, json.Unmarshal(o.payload, &m))
		sent[m.Zone] = m
	}
	require.Contains(t, sent, "row-a")
	assert.Equal(t, 60, sent["row-a"].Minutes)
	require.Contains(t, sent, "row-b")
	assert.Equal(t, "v9", sent["row-b"].Valve)
}
