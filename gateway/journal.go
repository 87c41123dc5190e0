package gateway

import (
	"context"
	"fmt"
	"slices"
	"sync"
	"time"

	"etpulse/gateway/ingest"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/state"
)

// Journalled intake (state.journal, the default). A message is acknowledged
// only once it is durable. Instead of one state-file transaction per batch
// (a bbolt commit rewrites every page it touches plus its meta page, with
// two fdatasyncs: about 21 KB written per message at a farm's rate of a few
// messages a second), intake
//
//  1. gathers messages for up to state.ack_window (2 s) or ackMax messages,
//  2. appends them to the journal beside the state file with one write and
//     one fdatasync (a page or two) and acknowledges them,
//  3. keeps their readings in memory until a checkpoint writes them into
//     the state file in one transaction and empties the journal.
//
// A checkpoint comes after state.checkpoint_every (5 min), when the journal
// grows past its bounds, at shutdown, and at once for a reading that the
// pipeline's timing depends on (pipeline.Urgent: it closes or revises an
// hour, or is held ahead of the clock) or when a pass of the pipeline is
// due: hour records, revisions, zone steps and commands are not delayed.
// What is delayed, by at most checkpoint_every, is what reads the accepted
// samples between checkpoints: the reading-level checks (range, spike,
// stuck) and the pipeline's metrics. The silence check (Monitor.Heard) and
// the status pages' last readings (Gateway.LastSeen) hear every message at
// once.
//
// At start the readings left in the journal by a stop or a crash are
// stored before anything else; a message stored twice (a crash between a
// checkpoint and the journal's reset) is a duplicate the pipeline drops.

// Journal bounds: a checkpoint comes before the journal holds more.
const (
	// ackMax bounds the messages held unacknowledged in one window: below
	// the broker's window of unacknowledged messages to one client
	// (mosquitto's max_inflight_messages, 20 by default), or the window
	// could never fill and would always last ack_window.
	ackMax = 16
	// maxPendingReading bounds a checkpoint's transaction: at 5,000
	// stations its dirty pages are most of the peak heap (16,384 readings:
	// peak RSS 337-366 MiB, 8,192: 273-298, 4,096: 240-247, with 3.2-3.7,
	// 3.9-4.1 and 4.5 KB written per message; deploy/PERFORMANCE.md). A
	// farm's five minutes (84 stations, 8.4 msg/s) stay under it.
	maxPendingReading = 8192
	maxJournalBytes   = 8 << 20
)

// journalIntake is intake's journal and the readings acknowledged but not
// yet in the state file. It is used by the intake goroutine only.
type journalIntake struct {
	j       *state.Journal
	window  time.Duration // state.ack_window
	every   time.Duration // state.checkpoint_every
	pending []ingest.Reading
	// since is the real time (with its monotonic reading) the oldest
	// journalled message not yet checkpointed was journalled; zero when
	// none is. Like ack_window, checkpoint_every bounds real waiting, not
	// the gateway clock, which a test or a replay may step.
	since time.Time
}

// newJournalIntake returns nil when the configuration writes every batch
// into the state file (journal off, or checkpoint_every 0) or the caller
// steps the gateway (the demo and tests read the state file after a step).
func (g *Gateway) newJournalIntake() *journalIntake {
	s := g.cfg.State
	if g.stepped || !s.Journalled() || s.CheckpointEvery <= 0 {
		return nil
	}
	return &journalIntake{window: s.AckWindow.D(), every: s.CheckpointEvery.D()}
}

// openJournal opens the journal and stores what a previous run left in it.
func (g *Gateway) openJournal(ctx context.Context) error {
	path := state.JournalPath(g.deps.DB.Path())
	j, entries, err := state.OpenJournal(path)
	if err != nil {
		return fmt.Errorf("intake: %w", err)
	}
	g.jr.j = j
	if len(entries) == 0 {
		return nil
	}
	var readings []ingest.Reading
	for _, e := range entries {
		rds, _ := g.router.Route(e.Topic, e.Payload, e.Received) // rejections were counted when they arrived
		for i := range rds {
			rds[i].Arrived = e.Received
		}
		readings = append(readings, rds...)
	}
	// In reading-time order, as startup stores a resumed session: the
	// journal holds messages in arrival order, and a start-up batch was
	// sorted only in memory before the stop.
	slices.SortStableFunc(readings, func(a, b ingest.Reading) int { return a.Sample.Time.Compare(b.Sample.Time) })
	g.jr.pending = readings
	g.jr.since = time.Now()
	g.log.Info("storing the journal's messages", "messages", len(entries), "readings", len(readings), "journal", path)
	return g.checkpoint(ctx, g.deps.Clock.Now())
}

// closeJournal checkpoints what is pending (bounded: a checkpoint that
// fails leaves it in the journal for the next start) and closes the journal.
func (g *Gateway) closeJournal(ctx context.Context) {
	if g.jr == nil || g.jr.j == nil {
		return
	}
	cctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 10*time.Second)
	defer cancel()
	if err := g.checkpoint(cctx, g.deps.Clock.Now()); err != nil {
		g.log.Error("checkpoint at shutdown failed; the journal keeps the readings for the next start", "err", err)
	}
	if err := g.jr.j.Close(); err != nil {
		g.log.Error("closing the journal", "err", err)
	}
	g.jr.j = nil
}

// gather waits, for a window that has begun with batch, for more messages
// until the window's time is up, ackMax messages are held, a pass of the
// pipeline falls due (wake) or ctx ends. The window's time is ack_window of
// real time or of the gateway clock, whichever passes first: with a
// simulated clock that runs fast (the load tool) a window ends when the
// clock has moved on, as it would on a farm.
func (g *Gateway) gather(ctx context.Context, batch []mqtt.Message, wake <-chan time.Time) []mqtt.Message {
	if len(batch) >= ackMax || g.jr.window <= 0 {
		return batch
	}
	end := time.NewTimer(g.jr.window)
	defer end.Stop()
	clockEnd := g.deps.Clock.After(g.jr.window)
	for len(batch) < ackMax {
		select {
		case m := <-g.queue:
			batch = append(batch, m)
		case <-clockEnd:
			return batch
		case <-end.C:
			return batch
		case <-wake:
			return batch
		case <-ctx.Done():
			return batch
		}
	}
	return batch
}

// journal makes batch durable in the journal; on a disk fault it pauses
// like a state-file write (see store). stored is false when ctx ended
// first: the messages are not acknowledged.
func (g *Gateway) journal(ctx context.Context, now time.Time, batch []mqtt.Message) (stored bool, err error) {
	entries := make([]state.JournalEntry, len(batch))
	for i, m := range batch {
		entries[i] = state.JournalEntry{Received: now, Topic: m.Topic, Payload: m.Payload}
	}
	return g.persist(ctx, now, len(batch), func(time.Time) error { return g.jr.j.Append(entries) })
}

// checkpointDue reports whether the pending readings must go into the
// state file now.
func (g *Gateway) checkpointDue(now time.Time, fresh []ingest.Reading) bool {
	jr := g.jr
	if len(jr.pending) == 0 && jr.j.Size() == 0 {
		return false
	}
	if time.Since(jr.since) >= jr.every || len(jr.pending) >= maxPendingReading || jr.j.Size() >= maxJournalBytes {
		return true
	}
	if next := g.pipe.NextDeadline(); !next.IsZero() && !now.Before(next) {
		return true // a pass of the pipeline is due: it must see every reading
	}
	return g.pipe.Urgent(fresh, now)
}

// checkpointTimer fires when the journal's oldest message is due for a
// checkpoint; a nil channel when there is none (or no journal). stop
// releases the timer.
func (g *Gateway) checkpointTimer() (<-chan time.Time, func()) {
	if g.jr == nil || g.jr.since.IsZero() {
		return nil, func() {}
	}
	t := time.NewTimer(max(time.Until(g.jr.since.Add(g.jr.every)), 0))
	return t.C, func() { t.Stop() }
}

// checkpoint writes the pending readings into the state file in one
// transaction (more when hours close between them) and empties the
// journal. Records of the hours they closed are handed to the publisher.
func (g *Gateway) checkpoint(ctx context.Context, now time.Time) error {
	jr := g.jr
	if len(jr.pending) > 0 {
		emitted, stored, err := g.store(ctx, now, jr.pending, len(jr.pending))
		g.emitted.Add(uint64(emitted))
		if emitted > 0 {
			g.kickPublisher()
		}
		if err != nil {
			return err
		}
		if !stored {
			return fmt.Errorf("checkpoint: %w", ctx.Err())
		}
	}
	jr.pending = jr.pending[:0]
	g.recent.clear()
	if err := jr.j.Reset(); err != nil {
		// The readings are in the state file; should the journal keep them,
		// the next start stores them again as duplicates.
		g.log.Error("emptying the journal after a checkpoint", "err", err)
	}
	jr.since = time.Time{}
	return nil
}

// recentSeen is, per station, what the sensors' readings kept in the
// journal since the last checkpoint say of when each was last heard: the
// status pages show it with the state file's (LastSeen), so a station's
// last reading is not checkpoint_every old on them. Written by the intake
// goroutine, read by the status pages'.
type recentSeen struct {
	mu sync.Mutex
	by map[[2]string][]pipeline.Seen
}

// note adds readings that arrived at at.
func (r *recentSeen) note(readings []ingest.Reading, at time.Time) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.by == nil {
		r.by = map[[2]string][]pipeline.Seen{}
	}
	for _, rd := range readings {
		k := [2]string{rd.Site, rd.Station}
		rows := r.by[k]
		i := slices.IndexFunc(rows, func(s pipeline.Seen) bool { return s.Sensor == rd.Sample.Sensor })
		if i < 0 {
			rows = append(rows, pipeline.Seen{Sensor: rd.Sample.Sensor})
			i = len(rows) - 1
		}
		s := &rows[i]
		if at.After(s.Arrival) {
			s.Arrival = at
		}
		if rd.Sample.Time.After(s.Reading) {
			v := rd.Sample.Value
			s.Reading, s.Quantity, s.Value = rd.Sample.Time, rd.Sample.Quantity, &v
		}
		r.by[k] = rows
	}
}

// clear forgets them once a checkpoint has put them in the state file.
func (r *recentSeen) clear() {
	r.mu.Lock()
	defer r.mu.Unlock()
	clear(r.by)
}

// merge returns rows (the state file's) with each sensor's later arrival
// and later reading taken from the journal's.
func (r *recentSeen) merge(site, station string, rows []pipeline.Seen) []pipeline.Seen {
	r.mu.Lock()
	defer r.mu.Unlock()
	for _, p := range r.by[[2]string{site, station}] {
		i := slices.IndexFunc(rows, func(s pipeline.Seen) bool { return s.Sensor == p.Sensor })
		if i < 0 {
			rows = append(rows, p)
			continue
		}
		s := &rows[i]
		if p.Arrival.After(s.Arrival) {
			s.Arrival = p.Arrival
		}
		if p.Reading.After(s.Reading) {
			s.Reading, s.Quantity, s.Value = p.Reading, p.Quantity, p.Value
		}
	}
	return rows
}

// LastSeen returns, for every sensor of the station that has been heard,
// when it was last heard and its latest reading: the state file's
// (pipeline.LastSeen) with the readings the journal holds since the last
// checkpoint.
func (g *Gateway) LastSeen(site, station string) ([]pipeline.Seen, error) {
	rows, err := g.pipe.LastSeen(site, station)
	if err != nil {
		return nil, err
	}
	return g.recent.merge(site, station, rows), nil
}
