package gateway_test

import (
	"context"
	"fmt"
	"path/filepath"
	"sort"
	"sync"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/ingest"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// expectedHour is what the test computes directly with package hourly.
type expectedHour struct {
	first   *hourly.Result // from the samples published on time
	final   *hourly.Result // from every sample, when late ones exist
	late    bool
	onTimeN map[hourly.Quantity]int
	allN    map[hourly.Quantity]int
}

// expect computes every hour of the day for one station the way the pipeline
// documents it: hours in order, the night carry chained through first
// emissions, a revision recomputed with the carry its hour first used.
func expect(t *testing.T, st config.Station, msgs []demo.Message, station string, start time.Time, hours int) map[time.Time]*expectedHour {
	t.Helper()
	onTime := map[time.Time][]hourly.Sample{}
	all := map[time.Time][]hourly.Sample{}
	for _, m := range msgs {
		if m.Kind == demo.Bad || m.Kind == demo.Duplicate {
			continue
		}
		for _, tr := range m.Samples {
			if tr.Station != station {
				continue
			}
			h := tr.Sample.Time.Truncate(time.Hour) // UTC+10: hours align with UTC hours
			all[h] = append(all[h], tr.Sample)
			if m.Kind == demo.Normal {
				onTime[h] = append(onTime[h], tr.Sample)
			}
		}
	}
	opts := hourly.AggregateOptions{WindHeight: st.WindHeight, MinCoverage: st.MinCoverage}
	counts := func(a hourly.Aggregate) map[hourly.Quantity]int {
		m := map[hourly.Quantity]int{}
		for q, s := range a.Stats {
			m[q] = s.Count
		}
		return m
	}
	out := map[time.Time]*expectedHour{}
	var carry hourly.Carry
	for i := 0; i < hours; i++ {
		h := start.Add(time.Duration(i) * time.Hour)
		e := &expectedHour{late: len(all[h]) != len(onTime[h])}
		a, err := hourly.AggregateHour(h, onTime[h], opts)
		require.NoError(t, err)
		e.onTimeN = counts(a)
		carryIn := carry
		if len(a.Missing) == 0 {
			r, c, err := hourly.Compute(st.HourlyStation(), st.Reference, a.Hour, carry)
			require.NoError(t, err)
			e.first, carry = &r, c
		}
		if e.late {
			a, err := hourly.AggregateHour(h, all[h], opts)
			require.NoError(t, err)
			e.allN = counts(a)
			if len(a.Missing) == 0 {
				r, _, err := hourly.Compute(st.HourlyStation(), st.Reference, a.Hour, carryIn)
				require.NoError(t, err)
				e.final = &r
			}
		}
		out[h] = e
	}
	return out
}

func assertResult(t *testing.T, want, got *hourly.Result, what string) {
	t.Helper()
	if want == nil {
		assert.Nil(t, got, what)
		return
	}
	if !assert.NotNil(t, got, what) {
		return
	}
	// The record on MQTT carries each number rounded to its quantity's
	// precision (gateway/vocab): within half a step of the direct result.
	assert.InDelta(t, want.ET, got.ET, 0.005+1e-9, what+": ET")
	assert.InDelta(t, want.Rn, got.Rn, 0.0005+1e-9, what+": Rn")
	assert.InDelta(t, want.G, got.G, 0.0005+1e-9, what+": G")
	assert.InDelta(t, want.Ea, got.Ea, 0.0005+1e-9, what+": ea")
	assert.InDelta(t, want.Fcd, got.Fcd, 0.0005+1e-9, what+": fcd")
	assert.Equal(t, want.FcdSource, got.FcdSource, what+": fcd source")
	assert.Equal(t, want.Reference, got.Reference, what)
}

// TestLiveDayAgainstMosquitto publishes a simulated day for two stations
// (JSON, fields and SenML payloads, duplicates, out-of-order and late
// readings, malformed messages) through a real mosquitto and checks every
// hourly record received on the results topic against hourly.AggregateHour
// and hourly.Compute run directly on the same samples.
func TestLiveDayAgainstMosquitto(t *testing.T) {
	url := testenv.MQTT(t)
	root := fmt.Sprintf("itday%d", time.Now().UnixNano())
	sim := demo.New(demo.Options{Seed: 11, TopicRoot: root, Stations: []string{demo.Paddock, demo.Glasshouse}})
	start := sim.Start()
	dayEnd := start.Add(24 * time.Hour)
	msgs := sim.Generate(start, dayEnd.Add(10*time.Minute))

	dir := t.TempDir()
	cfg, err := sim.Config(demo.ConfigOptions{
		BrokerURL: url, ClientID: root + "-gw", StatePath: filepath.Join(dir, "state.db"),
		LateWindow: 30 * time.Hour, SilenceClose: 24 * time.Hour,
	})
	require.NoError(t, err)
	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })

	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Minute)
	defer cancel()
	// One handler worker keeps the broker's order, so the out-of-order
	// readings stay within the close grace as the simulator intends.
	client, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: root + "-gw", Workers: 1, MaxInflight: 1000})
	require.NoError(t, err)
	t.Cleanup(func() { client.Close(time.Second) })

	// Results subscriber.
	prefix := root + "/out"
	var mu sync.Mutex
	var recs []hourly.Record
	sub, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: root + "-results", CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { sub.Close(time.Second) })
	require.NoError(t, sub.Subscribe(prefix+"/+/+/hour", 1, func(m mqtt.Message) {
		rec, err := pipeline.UnmarshalRecord(m.Payload)
		assert.NoError(t, err)
		assert.Equal(t, config.RecordTopic(prefix, rec.Site, rec.Station), m.Topic)
		mu.Lock()
		recs = append(recs, rec)
		mu.Unlock()
		m.Ack()
	}))

	reg := prometheus.NewRegistry()
	now := dayEnd.Add(30 * time.Minute) // the clock only decides too-old/too-future here
	cfg.TopicPrefix, cfg.Alerts.TopicPrefix = prefix, prefix
	// Moved once, after every message is handled, past the close grace: a
	// late reading's revision waits that long for more late readings. No
	// silence closes (silence_close is a day): data decides.
	clk := clock.NewManual(now)
	g, err := gateway.New(cfg, gateway.Deps{
		Registerer: reg, DB: db, MQTT: client, Clock: clk,
	})
	require.NoError(t, err)
	runDone := make(chan error, 1)
	go func() { runDone <- g.Run(ctx) }()
	select {
	case <-g.Ready():
	case err := <-runDone:
		t.Fatalf("gateway stopped: %v", err)
	}

	pub := paho.NewClient(paho.NewClientOptions().AddBroker(url).SetClientID(root + "-pub").SetCleanSession(true).SetMaxResumePubInFlight(1000))
	tok := pub.Connect()
	require.True(t, tok.WaitTimeout(10*time.Second))
	require.NoError(t, tok.Error())
	t.Cleanup(func() { pub.Disconnect(100) })

	began := time.Now()
	toks := make([]paho.Token, 0, len(msgs))
	for _, m := range msgs {
		toks = append(toks, pub.Publish(m.Topic, 1, false, m.Payload))
	}
	for _, tk := range toks {
		require.True(t, tk.WaitTimeout(30*time.Second))
		require.NoError(t, tk.Error())
	}
	require.Eventually(t, func() bool { return g.Handled() == uint64(len(msgs)) }, 2*time.Minute, 5*time.Millisecond,
		"handled %d of %d", g.Handled(), len(msgs))
	elapsed := time.Since(began)
	clk.Set(now.Add(cfg.Sites[0].Stations[0].CloseGrace.D() + time.Second))
	t.Logf("gateway handled %d messages in %s: %.0f msg/s (publish, route, store durably, ack, close hours, publish records)",
		len(msgs), elapsed.Round(time.Millisecond), float64(len(msgs))/elapsed.Seconds())

	stations := []string{demo.Paddock, demo.Glasshouse}
	want := map[string]map[time.Time]*expectedHour{}
	nRecords := 0
	for _, id := range stations {
		want[id] = expect(t, *cfg.Sites[0].StationByID(id), msgs, id, start, 24)
		for _, e := range want[id] {
			nRecords++
			if e.late {
				nRecords++ // at least one revision
			}
		}
	}
	assert.Eventually(t, func() bool { mu.Lock(); defer mu.Unlock(); return len(recs) >= nRecords }, 5*time.Second, 10*time.Millisecond,
		"records: want at least %d, emitted %d, published %d", nRecords, g.Emitted(), g.Published())
	cancel()
	require.NoError(t, <-runDone)

	mu.Lock()
	defer mu.Unlock()
	latest := map[string]map[time.Time]hourly.Record{}
	first := map[string]map[time.Time]hourly.Record{}
	for _, id := range stations {
		latest[id], first[id] = map[time.Time]hourly.Record{}, map[time.Time]hourly.Record{}
	}
	for _, r := range recs {
		require.Equal(t, demo.Site, r.Site)
		if r.Revision == 0 {
			_, dup := first[r.Station][r.Start]
			assert.False(t, dup, "two first emissions of %s %s", r.Station, r.LocalStart)
			first[r.Station][r.Start] = r
		}
		if old, ok := latest[r.Station][r.Start]; !ok || r.Revision > old.Revision {
			latest[r.Station][r.Start] = r
		}
	}
	revised, complete := 0, 0
	for _, id := range stations {
		hoursSeen := make([]time.Time, 0, 24)
		for h := range first[id] {
			hoursSeen = append(hoursSeen, h)
		}
		sort.Slice(hoursSeen, func(i, j int) bool { return hoursSeen[i].Before(hoursSeen[j]) })
		require.Len(t, hoursSeen, 24, "%s: one first emission per hour of the day", id)
		assert.Equal(t, start, hoursSeen[0])
		for h, e := range want[id] {
			what := fmt.Sprintf("%s %s", id, first[id][h].LocalStart)
			f := first[id][h]
			assertResult(t, e.first, f.Result, what+" first emission")
			assert.Equal(t, e.first != nil, f.Complete, what)
			for q, n := range e.onTimeN {
				assert.Equal(t, n, f.Stats[q].Count, "%s: %s samples", what, q)
			}
			if f.Complete {
				complete++
			}
			l := latest[id][h]
			if !e.late {
				assert.Equal(t, 0, l.Revision, what+": no late data, no revision")
				continue
			}
			revised++
			assert.Positive(t, l.Revision, what+": late data revises the hour")
			assertResult(t, e.final, l.Result, what+" final revision")
			for q, n := range e.allN {
				assert.Equal(t, n, l.Stats[q].Count, "%s: %s samples after revision", what, q)
			}
		}
	}
	assert.Positive(t, revised)
	assert.Greater(t, complete, 40, "nearly every hour is complete")

	// Every malformed message was counted, and every duplicate dropped.
	router, err := ingest.NewRouter(cfg)
	require.NoError(t, err)
	wantRejected, wantDup := 0, 0
	for _, m := range msgs {
		switch m.Kind {
		case demo.Bad:
			_, rejs := router.Route(m.Topic, m.Payload, now)
			wantRejected += len(rejs)
		case demo.Duplicate:
			wantDup += len(m.Samples)
		}
	}
	assert.Positive(t, wantRejected)
	assert.Equal(t, float64(wantRejected), sumMetric(t, reg, "etpulse_messages_rejected_total"))
	assert.Equal(t, float64(wantDup), sumMetric(t, reg, "etpulse_readings_duplicate_total"))
	assert.Equal(t, float64(len(msgs)), sumMetric(t, reg, "etpulse_messages_received_total"))
	assert.Equal(t, float64(revised), sumMetric(t, reg, "etpulse_hour_revisions_total")-float64(extraRevisions(recs)))
	assert.Equal(t, 2, testutil.CollectAndCount(reg, "etpulse_last_hour_closed_timestamp_seconds"), "one series per station")
}

// extraRevisions counts revisions beyond the first of each hour (several late
// readings of one hour arriving in separate batches).
func extraRevisions(recs []hourly.Record) int {
	n := 0
	for _, r := range recs {
		if r.Revision > 1 {
			n++
		}
	}
	return n
}

func sumMetric(t *testing.T, g prometheus.Gatherer, name string) float64 {
	t.Helper()
	mfs, err := g.Gather()
	require.NoError(t, err)
	total := 0.0
	for _, mf := range mfs {
		if mf.GetName() != name {
			continue
		}
		for _, m := range mf.GetMetric() {
			total += m.GetCounter().GetValue()
		}
	}
	return total
}
