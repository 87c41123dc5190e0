package zones

import (
	"context"
	"encoding/json"
	"path/filepath"
	"sync"
	"testing"
	"testing/synctest"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
)

// loopBroker delivers publishes to the subscriptions of the same process at
// once, and answers command topics as a valve controller does (started at
// the run's start, finished at its end, stopped when a stop reaches it). It
// lets the live scheduler loop run inside a synctest bubble, where time is
// virtual; the same loop against a real broker is tested with mosquitto.
type loopBroker struct {
	mu      sync.Mutex
	subs    map[string]func(mqtt.Message)
	reports map[string]string // command topic -> report topic
	timers  map[string][]*time.Timer
	started map[string]time.Time
}

func (b *loopBroker) Subscribe(filter string, _ byte, h func(mqtt.Message)) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.subs[filter] = h
	return nil
}

func (b *loopBroker) report(topic string, r ReportMessage) {
	payload, _ := json.Marshal(r)
	b.mu.Lock()
	h := b.subs[topic]
	b.mu.Unlock()
	if h != nil {
		h(mqtt.Message{Topic: topic, Payload: payload, QoS: 1, Ack: func() {}})
	}
}

func (b *loopBroker) Publish(_ context.Context, topic string, _ byte, _ bool, payload []byte) error {
	rt, ok := b.reports[topic]
	if !ok {
		return nil
	}
	msg, err := DecodeValveMessage(payload)
	if err != nil {
		return err
	}
	now := time.Now()
	b.mu.Lock()
	defer b.mu.Unlock()
	if s := msg.Stop; s != nil {
		for _, t := range b.timers[s.ID] {
			t.Stop()
		}
		ran := 0.0
		if st, ok := b.started[s.ID]; ok {
			ran = now.Sub(st).Minutes()
		}
		go b.report(rt, ReportMessage{ID: s.ID, State: "stopped", MinutesRun: &ran, Reason: "stop received"})
		return nil
	}
	c := msg.Run
	if c.Attempt > 1 {
		return nil
	}
	start := c.Start
	if start.Before(now) {
		start = now
	}
	minutes := float64(c.Minutes)
	b.timers[c.ID] = []*time.Timer{
		time.AfterFunc(start.Sub(now), func() {
			b.mu.Lock()
			b.started[c.ID] = time.Now()
			b.mu.Unlock()
			b.report(rt, ReportMessage{ID: c.ID, State: "started"})
		}),
		time.AfterFunc(start.Add(time.Duration(c.Minutes)*time.Minute).Sub(now), func() {
			b.report(rt, ReportMessage{ID: c.ID, State: "finished", MinutesRun: &minutes})
		}),
	}
	return nil
}

// TestBacktestDecidesAsLive: the live scheduler loop (Service.Run, woken by
// its own deadlines, hour closes and reports) and the backtest take the
// same decisions on one recorded fortnight: every command, with its planned
// start, minutes, reason, reports and credit, and every zone's end state
// are the same.
func TestBacktestDecidesAsLive(t *testing.T) {
	path := filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml")
	type outcome struct {
		ledger []controllers.Command
		status []ZoneStatus
	}
	run := func(t *testing.T, live bool) outcome {
		var out outcome
		synctest.Test(t, func(t *testing.T) {
			// The bubble's clock starts in 2000: the season is moved there.
			cfg, err := config.Load(path)
			require.NoError(t, err)
			db, err := state.Open(filepath.Join(t.TempDir(), "z.db"))
			require.NoError(t, err)
			defer db.Close()
			loc := time.FixedZone("UTC-8", -8*3600)
			first := time.Date(2000, 7, 1, 0, 0, 0, 0, loc)
			records := syntheticHours(first, 14)
			for i := range records {
				records[i].Station = "mast"
			}
			grace := cfg.Sites[0].Stations[0].CloseGrace.D()
			time.Sleep(time.Until(first))
			if !live {
				bt, err := NewBacktest(cfg, db, nil)
				require.NoError(t, err)
				for _, rec := range records {
					require.NoError(t, bt.HandleHour(nil, rec))
				}
				require.NoError(t, bt.Advance(records[len(records)-1].End.Add(grace+12*time.Hour)))
				out.ledger, err = bt.svc.Ledger("brackenby")
				require.NoError(t, err)
				out.status, err = bt.svc.Status(time.Time{})
				require.NoError(t, err)
				return
			}
			broker := &loopBroker{subs: map[string]func(mqtt.Message){}, reports: map[string]string{},
				timers: map[string][]*time.Timer{}, started: map[string]time.Time{}}
			svc, err := New(Options{Config: cfg, DB: db, MQTT: broker})
			require.NoError(t, err)
			for _, ref := range svc.zones {
				broker.reports[ref.cmdTopic] = ref.reportTopic
			}
			ctx, cancel := context.WithCancel(context.Background())
			done := make(chan error, 1)
			go func() { done <- svc.Run(ctx) }()
			for _, rec := range records {
				time.Sleep(time.Until(rec.End.Add(grace)))
				synctest.Wait() // passes due at this instant run first, as in the backtest
				require.NoError(t, db.Update(func(tx *bbolt.Tx) error { return svc.HandleHour(tx, rec) }))
				synctest.Wait()
			}
			time.Sleep(time.Until(records[len(records)-1].End.Add(grace + 12*time.Hour)))
			synctest.Wait()
			cancel()
			require.NoError(t, <-done)
			out.ledger, err = svc.Ledger("brackenby")
			require.NoError(t, err)
			out.status, err = svc.Status(time.Time{})
			require.NoError(t, err)
		})
		return out
	}
	want := run(t, false)
	got := run(t, true)
	require.NotEmpty(t, want.ledger)
	require.Equal(t, len(want.ledger), len(got.ledger))
	for i := range want.ledger {
		w, g := want.ledger[i], got.ledger[i]
		assert.Equal(t, w.ID, g.ID)
		assert.Equal(t, w.Minutes, g.Minutes, w.ID)
		assert.Equal(t, w.Reason, g.Reason, w.ID)
		assert.Equal(t, w.State, g.State, w.ID)
		assert.True(t, w.SentAt.Equal(g.SentAt), "%s sent %v live %v", w.ID, w.SentAt, g.SentAt)
		assert.True(t, w.StartedAt.Equal(g.StartedAt), w.ID)
		assert.True(t, w.EndedAt.Equal(g.EndedAt), w.ID)
		assert.Equal(t, w.CreditMM, g.CreditMM, w.ID)
	}
	for i := range want.status {
		assert.Equal(t, want.status[i].State.Depletion, got.status[i].State.Depletion, want.status[i].Zone)
	}
}
