package zones

import (
	"context"
	"encoding/json"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
)

// recBroker records what the service publishes (hold and water replies)
// and the subscriptions it makes; it delivers nothing by itself.
type recBroker struct {
	mu   sync.Mutex
	pubs map[string][][]byte
	subs map[string]func(mqtt.Message)
}

func (b *recBroker) Subscribe(filter string, _ byte, h func(mqtt.Message)) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.subs == nil {
		b.subs = map[string]func(mqtt.Message){}
	}
	b.subs[filter] = h
	return nil
}

func (b *recBroker) Publish(_ context.Context, topic string, _ byte, _ bool, payload []byte) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.pubs == nil {
		b.pubs = map[string][][]byte{}
	}
	b.pubs[topic] = append(b.pubs[topic], payload)
	return nil
}

func (b *recBroker) published(topic string) int {
	b.mu.Lock()
	defer b.mu.Unlock()
	return len(b.pubs[topic])
}

// deliver hands payload to the handler subscribed to filter, as if the
// message had arrived on topic (which a broker only does when the filter
// matches; a test may pass another topic to check the handler's own guard).
func (b *recBroker) deliver(t *testing.T, filter, topic string, payload any) bool {
	t.Helper()
	raw, err := json.Marshal(payload)
	require.NoError(t, err)
	b.mu.Lock()
	h := b.subs[filter]
	b.mu.Unlock()
	require.NotNil(t, h, "no subscription %s", filter)
	acked := false
	h(mqtt.Message{Topic: topic, Payload: raw, QoS: 1, Ack: func() { acked = true }})
	return acked
}

// sentFixture is the Fernhill farm with its three 240-minute commands sent
// at 10:01:01 for a 10:02 start (UTC-8), subscribed through a recBroker.
func sentFixture(t *testing.T) (*fixture, *recBroker, time.Time) {
	t.Helper()
	start := time.Date(2026, 7, 1, 10, 0, 30, 0, fernLoc)
	b := &recBroker{}
	f := newFixture(t, testConfig(t), b, start)
	require.NoError(t, f.svc.Start(context.Background()))
	f.hour(t, record(start.Truncate(time.Hour).Add(-time.Hour), 0.5, 0)) // 30.5 mm everywhere
	_, _, err := f.svc.tick(start)
	require.NoError(t, err)
	_, sends, err := f.svc.tick(start.Add(31 * time.Second))
	require.NoError(t, err)
	require.Len(t, sends, 3)
	return f, b, time.Date(2026, 7, 1, 10, 2, 0, 0, fernLoc)
}

func reportTopic(zone string) string { return config.ZoneReportTopic("etpulse", "fernhill", zone) }

// The forged report of the fault campaign: finished with 1e15 litres, 55 s
// before the command's start. It is refused without answering the command,
// and the real controller's report after the run is credited.
func TestForgedEarlyReportRefusedRealOneCredited(t *testing.T) {
	f, b, cmdStart := sentFixture(t)
	id := "row-a-20260701T1802Z-c1"
	f.clock.set(cmdStart.Add(-55 * time.Second))
	require.True(t, b.deliver(t, reportTopic("row-a"), reportTopic("row-a"), ReportMessage{ID: id, State: "finished", VolumeL: fp(1e15)}))
	assert.InDelta(t, 30.5, f.status(t, "row-a").State.Depletion, 1e-9, "nothing credited")
	assert.Equal(t, 1.0, testutil.ToFloat64(f.svc.m.badReports.WithLabelValues("fernhill", "row-a")))
	led, err := f.svc.Ledger("fernhill")
	require.NoError(t, err)
	for _, c := range led {
		assert.Equal(t, controllers.Sent, c.State, c.ID)
	}

	// The real report after the 240 minutes: 240/60 x 6 x 0.9 = 21.6 mm.
	f.clock.set(cmdStart.Add(241 * time.Minute))
	require.True(t, b.deliver(t, reportTopic("row-a"), reportTopic("row-a"), ReportMessage{ID: id, State: "finished", MinutesRun: fp(240)}))
	assert.InDelta(t, 30.5-21.6, f.status(t, "row-a").State.Depletion, 1e-9)
	assert.Len(t, f.eventsOf(EventCredited), 1)
}

// A report, hold or water request that reaches a handler on a topic other
// than the configured one is refused (acknowledged, nothing applied): only
// the topics the configuration names are listened to.
func TestMessagesOnlyFromConfiguredTopics(t *testing.T) {
	f, b, cmdStart := sentFixture(t)
	f.clock.set(cmdStart.Add(241 * time.Minute))
	id := "row-a-20260701T1802Z-c1"

	// A report for row-a's command reaching row-a's handler from another topic.
	require.True(t, b.deliver(t, reportTopic("row-a"), "etpulse/fernhill/zones/row-a/report/extra", ReportMessage{ID: id, State: "finished", MinutesRun: fp(240)}))
	assert.InDelta(t, 30.5, f.status(t, "row-a").State.Depletion, 1e-9, "not credited from an unconfigured topic")
	// On its own topic naming another zone's command: refused.
	require.True(t, b.deliver(t, reportTopic("row-a"), reportTopic("row-a"), ReportMessage{ID: "row-b-20260701T1802Z-c1", State: "finished", MinutesRun: fp(240)}))
	assert.InDelta(t, 30.5, f.status(t, "row-b").State.Depletion, 1e-9, "row-b not credited from row-a's topic")
	assert.Equal(t, 2.0, testutil.ToFloat64(f.svc.m.badReports.WithLabelValues("fernhill", "row-a")))

	hold := config.HoldTopic("etpulse", "fernhill")
	require.True(t, b.deliver(t, hold, "fernhill/mast/t", HoldRequest{ID: "h1", Action: "hold", Reason: "forged"}))
	assert.Zero(t, b.published(config.HoldReplyTopic("etpulse", "fernhill")), "no reply to an unconfigured topic")

	water := config.WaterTopic("etpulse", "fernhill")
	require.True(t, b.deliver(t, water, "fernhill/mast/rh", WaterRequest{ID: "w1", Zone: "row-c", Kind: "applied", MM: fp(25), Who: "x", Why: "forged"}))
	assert.InDelta(t, 30.5, f.status(t, "row-c").State.Depletion, 1e-9, "no water from an unconfigured topic")
	assert.Zero(t, b.published(config.WaterReplyTopic("etpulse", "fernhill")))

	// From the configured topics the same messages apply.
	require.True(t, b.deliver(t, reportTopic("row-a"), reportTopic("row-a"), ReportMessage{ID: id, State: "finished", MinutesRun: fp(240)}))
	assert.InDelta(t, 30.5-21.6, f.status(t, "row-a").State.Depletion, 1e-9)
	require.True(t, b.deliver(t, water, water, WaterRequest{ID: "w1", Zone: "row-c", Kind: "applied", MM: fp(25), Who: "x", Why: "hose"}))
	assert.InDelta(t, 5.5, f.status(t, "row-c").State.Depletion, 1e-9)
	require.True(t, b.deliver(t, hold, hold, HoldRequest{ID: "h1", Action: "hold", Reason: "test"}))
	assert.Equal(t, 1, b.published(config.HoldReplyTopic("etpulse", "fernhill")))
}
