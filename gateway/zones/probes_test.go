package zones

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/config"
	"etpulse/hourly"
)

func TestProbesCorrectTheBalance(t *testing.T) {
	cfg := testConfig(t, "row-a")
	st := cfg.Sites[0].StationByID("mast")
	for _, id := range []string{"sm20", "sm60"} {
		st.Sensors = append(st.Sensors, config.Sensor{ID: id, Topic: "fernhill/mast/" + id, Format: config.FormatNumber,
			Channel: config.Channel{Quantity: hourly.SoilWater, Unit: "%"}})
	}
	cfg.Sites[0].Zones[0].Probes = &config.ZoneProbes{Sensors: []config.ZoneProbe{{Sensor: "sm20", DepthM: 0.2}, {Sensor: "sm60", DepthM: 0.6}}}
	start := time.Date(2026, 7, 1, 8, 0, 0, 0, fernLoc)
	f := newFixture(t, cfg, nil, start)

	// The model starts at 30 mm; the probes read 17 % in the whole root
	// zone: 1000 (0.25 - 0.17) x 1.0 = 80 mm.
	for _, id := range []string{"sm20", "sm60", "t"} {
		f.svc.ObserveSample("fernhill", "mast", hourly.Sample{Sensor: id, Quantity: hourly.SoilWater, Time: start.Add(50 * time.Minute), Value: 17}, start)
	}
	f.hour(t, record(start, 0.5, 0))
	s := f.status(t, "row-a")
	// Model: 30 + 0.5 = 30.5 mm; variance 25 + (0.5 x 0.5)^2; gain
	// 25.0625 / 50.0625 = 0.5006; fused 30.5 + 0.5006 x 49.5 = 55.28 mm.
	assert.InDelta(t, 55.28, s.State.Depletion, 0.01)

	// The correction is in the step and the state file.
	require.NoError(t, f.db.View(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		require.NoError(t, err)
		zr, err := f.svc.loadZone(b, f.svc.zones["fernhill/row-a"])
		require.NoError(t, err)
		require.NotNil(t, zr.State.Probe)
		assert.InDelta(t, 80, zr.State.Probe.LastProbeMM, 1e-9)
		return nil
	}))
	steps := f.eventsOf(EventStep)
	require.Len(t, steps, 1)
	require.NotNil(t, steps[0].Step.Probe)
	assert.InDelta(t, 24.78, steps[0].Step.Probe.CorrectionMM, 0.01)

	// Readings older than fresh_hours (3 h) are not used: the next hours
	// stand on the model alone.
	f.hour(t, record(start.Add(4*time.Hour), 0.5, 0))
	steps = f.eventsOf(EventStep)
	assert.Nil(t, steps[len(steps)-1].Step.Probe)
}
