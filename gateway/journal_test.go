package gateway_test

import (
	"context"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// journalGateway runs the paddock station alone on an embedded broker with
// the journal on and a checkpoint interval longer than the test: readings
// reach the state file only at the checkpoints the pipeline's timing
// forces, or at shutdown. journal, when not nil, is written as the journal
// a stopped or killed gateway left before the gateway starts.
type journalRun struct {
	sim     *demo.Sim
	cfg     *config.Config
	g       *gateway.Gateway
	publish func([]demo.Message)
	recs    chan hourly.Record
	stop    func()
}

func startJournalGateway(t *testing.T, root string, journal []demo.Message) *journalRun {
	t.Helper()
	srv, url, err := demo.StartBroker(true)
	require.NoError(t, err)
	t.Cleanup(func() { _ = srv.Close() })
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	t.Cleanup(cancel)
	sim, cfg, db, client := silentStation(ctx, t, url, root)
	require.True(t, cfg.State.Journalled(), "the journal is on by default")
	cfg.State.CheckpointEvery = config.Duration(time.Hour)
	if journal != nil {
		j, _, err := state.OpenJournal(state.JournalPath(cfg.State.Path))
		require.NoError(t, err)
		for _, m := range journal {
			require.NoError(t, j.Append([]state.JournalEntry{{Received: m.At, Topic: m.Topic, Payload: m.Payload}}))
		}
		require.NoError(t, j.Close())
	}
	clk := demo.NewClock(sim.Start())
	recs := make(chan hourly.Record, 16)
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: client, Clock: clk, OnRecord: func(r hourly.Record) { recs <- r }})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- g.Run(ctx) }()
	select {
	case <-g.Ready():
	case err := <-done:
		t.Fatalf("gateway stopped: %v", err)
	}
	sent := 0
	return &journalRun{sim: sim, cfg: cfg, g: g, recs: recs,
		publish: func(msgs []demo.Message) {
			t.Helper()
			for _, m := range msgs {
				clk.Set(m.At)
				require.NoError(t, srv.Publish(m.Topic, m.Payload, false, 1))
			}
			sent += len(msgs)
			require.Eventually(t, func() bool { return g.Handled() == uint64(sent) }, 20*time.Second, 5*time.Millisecond,
				"handled %d of %d", g.Handled(), sent)
		},
		stop: func() {
			cancel()
			require.NoError(t, <-done)
		}}
}

// counts is the number of readings per quantity the messages carry for the
// hour starting at hour.
func counts(msgs []demo.Message, hour time.Time) map[hourly.Quantity]int {
	out := map[hourly.Quantity]int{}
	for _, m := range msgs {
		for _, tr := range m.Samples {
			if tr.Sample.Time.Truncate(time.Hour).Equal(hour) {
				out[tr.Sample.Quantity]++
			}
		}
	}
	return out
}

// Acknowledged messages are durable in the journal, and their readings
// wait there, not in a state-file transaction each, until a checkpoint:
// here the reading that closes the hour forces one, so the hour's record
// counts every reading and comes at once; shutdown checkpoints the rest
// and empties the journal.
func TestJournalHoldsReadingsUntilCheckpoint(t *testing.T) {
	r := startJournalGateway(t, "journalhold", nil)
	jpath := state.JournalPath(r.cfg.State.Path)
	first := r.sim.Generate(r.sim.Start(), r.sim.Start().Add(40*time.Minute))
	// The station's first reading opens its first hour: a checkpoint.
	r.publish(first[:1])
	r.publish(first[1:])

	entries, err := state.ReadJournal(jpath)
	require.NoError(t, err)
	assert.Len(t, entries, len(first)-1, "every acknowledged message after the first is in the journal")
	seen, err := r.g.Pipeline().LastSeen(demo.Site, demo.Paddock)
	require.NoError(t, err)
	for _, s := range seen {
		assert.Equal(t, first[0].Time.UTC(), s.Reading.UTC(), "%s: only the first reading is in the state file before a checkpoint", s.Sensor)
	}
	// The status pages' last readings include the journal's.
	shown, err := r.g.LastSeen(demo.Site, demo.Paddock)
	require.NoError(t, err)
	require.Len(t, shown, len(seen))
	last := first[len(first)-1]
	for _, s := range shown {
		assert.Equal(t, last.Time.UTC(), s.Reading.UTC(), "%s: the latest reading, from the journal", s.Sensor)
		assert.Equal(t, last.At.UTC(), s.Arrival.UTC(), "%s: heard when the last message arrived", s.Sensor)
	}
	select {
	case rec := <-r.recs:
		t.Fatalf("record before the hour closed: %s", rec.LocalStart)
	default:
	}

	// Past the end of the hour and its close grace (5 min in the demo
	// configuration): the closing reading checkpoints and the hour closes.
	rest := r.sim.Generate(r.sim.Start().Add(40*time.Minute), r.sim.Start().Add(70*time.Minute))
	r.publish(rest)
	select {
	case rec := <-r.recs:
		assert.Equal(t, r.sim.Start(), rec.Start)
		for q, n := range counts(append(first, rest...), r.sim.Start()) {
			assert.Equal(t, n, rec.Stats[q].Count, "%s readings in the record", q)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("no record after the closing reading")
	}
	entries, err = state.ReadJournal(jpath)
	require.NoError(t, err)
	assert.Less(t, len(entries), len(rest), "the checkpoint emptied the journal")

	r.stop()
	entries, err = state.ReadJournal(jpath)
	require.NoError(t, err)
	assert.Empty(t, entries, "shutdown checkpoints the journal")
}

// Messages a gateway acknowledged and journalled before it was killed are
// stored at the next start, with the time they arrived: the hour's record
// counts them with the ones that come after the start.
func TestJournalLeftByAKillIsStoredAtStart(t *testing.T) {
	sim := demo.New(demo.Options{Seed: 4, TopicRoot: "journalkill", Stations: []string{demo.Paddock}, DupRate: -1, LateRate: -1, BadRate: -1, ShuffleRate: -1})
	left := sim.Generate(sim.Start(), sim.Start().Add(40*time.Minute))
	r := startJournalGateway(t, "journalkill", left)

	var seen []pipeline.Seen
	require.Eventually(t, func() bool {
		var err error
		seen, err = r.g.Pipeline().LastSeen(demo.Site, demo.Paddock)
		return err == nil && len(seen) > 0
	}, 10*time.Second, 5*time.Millisecond, "the journal's readings are stored at start")
	var latest time.Time
	for _, s := range seen {
		if s.Arrival.After(latest) {
			latest = s.Arrival
		}
	}
	assert.Equal(t, left[len(left)-1].At.UTC(), latest.UTC(), "arrival: the time the last message reached the gateway before the kill, not the start")
	rest := r.sim.Generate(r.sim.Start().Add(40*time.Minute), r.sim.Start().Add(70*time.Minute))
	r.publish(rest)
	select {
	case rec := <-r.recs:
		for q, n := range counts(append(left, rest...), r.sim.Start()) {
			assert.Equal(t, n, rec.Stats[q].Count, "%s readings in the record", q)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("no record after the closing reading")
	}
	r.stop()
}
