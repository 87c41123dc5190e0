package zones

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// The zone's RAW, trigger, hold and runtime charged today are gauges an
// alert rule can use, each labelled with site and zone.
func TestZoneLevelGauges(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, start)
	f.hour(t, record(start.Truncate(time.Hour).Add(-time.Hour), 0.5, 0)) // depletion 30.5 mm
	a := map[string]string{"site": "fernhill", "zone": "row-a"}
	b := map[string]string{"site": "fernhill", "zone": "row-b"}

	st := f.status(t, "row-a")
	assert.Equal(t, st.Levels.RAW, metricValue(t, f.reg, "etpulse_zone_raw_mm", a))
	assert.Greater(t, st.Levels.RAW, 20.0)
	assert.Equal(t, 20.0, metricValue(t, f.reg, "etpulse_zone_trigger_mm", a), "trigger_mm of the configuration")
	assert.Equal(t, 300.0*60, metricValue(t, f.reg, "etpulse_zone_runtime_cap_seconds", a), "max_minutes_per_day 300")
	assert.Equal(t, 0.0, metricValue(t, f.reg, "etpulse_zone_runtime_today_seconds", a))
	assert.Equal(t, 0.0, metricValue(t, f.reg, "etpulse_zone_hold", a))
	assert.Equal(t, 6, countSeries(t, f, "etpulse_zone_hold", "etpulse_zone_runtime_today_seconds"), "one series per zone each")

	// 240 minutes planned and sent for every zone: charged against today's cap.
	_, _, err := f.svc.tick(start)
	require.NoError(t, err)
	_, sends, err := f.svc.tick(start.Add(31 * time.Second))
	require.NoError(t, err)
	require.Len(t, sends, 3)
	assert.Equal(t, 240.0*60, metricValue(t, f.reg, "etpulse_zone_runtime_today_seconds", a))
	// The next standard-time day starts at zero.
	f.clock.set(time.Date(2026, 7, 2, 0, 30, 0, 0, fernLoc))
	assert.Equal(t, 0.0, metricValue(t, f.reg, "etpulse_zone_runtime_today_seconds", a))

	// A rain delay on row-b: 1 while it lasts, for row-b only; 0 once it ends.
	now := time.Date(2026, 7, 2, 1, 0, 0, 0, fernLoc)
	f.clock.set(now)
	r := f.svc.applyHold(f.svc.sites[0], []byte(`{"id":"r1","zone":"row-b","action":"rain_delay","hours":2}`), now)
	require.True(t, r.OK, r.Error)
	assert.Equal(t, 1.0, metricValue(t, f.reg, "etpulse_zone_hold", b))
	assert.Equal(t, 0.0, metricValue(t, f.reg, "etpulse_zone_hold", a))
	f.clock.set(now.Add(3 * time.Hour))
	assert.Equal(t, 0.0, metricValue(t, f.reg, "etpulse_zone_hold", b))
	// A site-wide hold holds every zone.
	r = f.svc.applyHold(f.svc.sites[0], []byte(`{"id":"r2","action":"hold","reason":"pump repair"}`), now.Add(3*time.Hour))
	require.True(t, r.OK, r.Error)
	assert.Equal(t, 1.0, metricValue(t, f.reg, "etpulse_zone_hold", a))
	assert.Equal(t, 1.0, metricValue(t, f.reg, "etpulse_zone_hold", b))
}

// countSeries counts the series of the named families.
func countSeries(t *testing.T, f *fixture, names ...string) int {
	t.Helper()
	mfs, err := f.reg.Gather()
	require.NoError(t, err)
	n := 0
	for _, mf := range mfs {
		for _, name := range names {
			if mf.GetName() == name {
				n += len(mf.GetMetric())
			}
		}
	}
	return n
}
