package demo

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/ingest"
)

// Every message the simulator calls normal decodes to exactly the samples it
// says it carries; every bad one is rejected whole.
func TestSimMessagesDecodeToTheirTruth(t *testing.T) {
	sim := New(Options{Seed: 7})
	cfg, err := sim.Config(ConfigOptions{BrokerURL: "tcp://127.0.0.1:1883", ClientID: "sim-test", StatePath: "x.db"})
	require.NoError(t, err)
	router, err := ingest.NewRouter(cfg)
	require.NoError(t, err)
	msgs := sim.Generate(sim.Start(), sim.Start().Add(24*time.Hour))
	kinds := map[Kind]int{}
	for _, m := range msgs {
		kinds[m.Kind]++
		rds, rejs := router.Route(m.Topic, m.Payload, m.Time)
		if m.Kind == Bad {
			assert.Empty(t, rds, "bad payload %q on %s decoded", m.Payload, m.Topic)
			assert.NotEmpty(t, rejs)
			continue
		}
		require.Empty(t, rejs, "payload %q on %s", m.Payload, m.Topic)
		require.Len(t, rds, len(m.Samples), "payload %q", m.Payload)
		bySensor := map[string]Truth{}
		for _, tr := range m.Samples {
			bySensor[tr.Sample.Sensor] = tr
		}
		for _, rd := range rds {
			tr, ok := bySensor[rd.Sample.Sensor]
			require.True(t, ok, "unexpected reading %s in %q", rd.Sample.Sensor, m.Payload)
			assert.Equal(t, Site, rd.Site)
			assert.Equal(t, tr.Station, rd.Station)
			assert.Equal(t, tr.Sample.Sensor, rd.Sample.Sensor)
			assert.Equal(t, tr.Sample.Quantity, rd.Sample.Quantity)
			assert.True(t, tr.Sample.Time.Equal(rd.Sample.Time), "%s vs %s", tr.Sample.Time, rd.Sample.Time)
			assert.Equal(t, tr.Sample.Value, rd.Sample.Value, "%s %s payload %q", tr.Station, tr.Sample.Sensor, m.Payload)
		}
	}
	assert.Positive(t, kinds[Duplicate])
	assert.Positive(t, kinds[Late])
	assert.Positive(t, kinds[Bad])
	assert.Greater(t, kinds[Normal], 8000)
	t.Logf("messages by kind: %v", kinds)

	// Deterministic for a seed.
	again := New(Options{Seed: 7}).Generate(sim.Start(), sim.Start().Add(24*time.Hour))
	assert.Equal(t, msgs, again)
}
