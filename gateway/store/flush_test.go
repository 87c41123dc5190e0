package store

import (
	"context"
	"errors"
	"slices"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"
)

// hookSink is a Sink that records every batch and lets a test decide, per
// write (numbered from 1), what happens: hook may block, and returns the
// settled count and error of a failed write (settled < 0: the write
// succeeds).
type hookSink struct {
	mu      sync.Mutex
	batches [][]Point
	hook    func(n int, pts []Point) (settled int, err error)
}

var _ Sink = (*hookSink)(nil)

func (s *hookSink) Write(_ context.Context, pts []Point) (int, []Refusal, error) {
	s.mu.Lock()
	s.batches = append(s.batches, pts)
	n := len(s.batches)
	s.mu.Unlock()
	if s.hook != nil {
		if settled, err := s.hook(n, pts); settled >= 0 {
			return settled, nil, err
		}
	}
	return len(pts), nil, nil
}

func (s *hookSink) writes() int {
	s.mu.Lock()
	defer s.mu.Unlock()
	return len(s.batches)
}

func (s *hookSink) lines() []string {
	s.mu.Lock()
	defer s.mu.Unlock()
	var out []string
	for _, b := range s.batches {
		for _, p := range b {
			out = append(out, Line(p))
		}
	}
	return out
}

func hookWriter(t *testing.T, o *Outbox, sink Sink, batch int) *Writer {
	t.Helper()
	w, err := NewWriter(o, WriterOptions{Sink: sink, BatchSize: batch, Registerer: prometheus.NewRegistry()})
	require.NoError(t, err)
	return w
}

// pendingZone returns an outbox with n zone points pending, one per hour.
func pendingZone(t *testing.T, n int) (*bbolt.DB, *Outbox, []Point) {
	t.Helper()
	db := openTestDB(t)
	o := openTestOutbox(t, db, OutboxOptions{Clock: time.Now})
	var pts []Point
	for h := range n {
		pts = append(pts, zonePt("z1", h, float64(h)))
	}
	enqueue(t, db, o, pts...)
	return db, o, pts
}

func linesOf(pts []Point) []string {
	out := make([]string, len(pts))
	for i, p := range pts {
		out[i] = Line(p)
	}
	return out
}

// holdingSink returns a sink that, at its first write, holds the state
// file's write lock before the batch is accepted, so no removal can commit
// until release is closed (holdErr then tells how the hold ended), and
// closes reached at write number at.
func holdingSink(db *bbolt.DB, at int) (sink *hookSink, reached, release chan struct{}, holdErr chan error) {
	held := make(chan struct{})
	reached, release, holdErr = make(chan struct{}), make(chan struct{}), make(chan error, 1)
	sink = &hookSink{hook: func(n int, _ []Point) (int, error) {
		if n == 1 {
			go func() {
				holdErr <- db.Update(func(*bbolt.Tx) error { close(held); <-release; return nil })
			}()
			<-held
		}
		if n == at {
			close(reached)
		}
		return -1, nil
	}}
	return sink, reached, release, holdErr
}

// TestFlushSendsWhileRemovalCommits: Flush sends the next batch while the
// removal of the previous one waits to commit (here: behind a write
// transaction the test holds), and sends no third batch before that removal
// committed, so a kill re-sends at most two batches.
func TestFlushSendsWhileRemovalCommits(t *testing.T) {
	db, o, pts := pendingZone(t, 8)

	sink, second, release, holdErr := holdingSink(db, 2)
	w := hookWriter(t, o, sink, 2)
	flushed := make(chan error, 1)
	go func() { flushed <- w.Flush(context.Background()) }()

	select {
	case <-second:
	case <-time.After(10 * time.Second):
		close(release)
		require.NoError(t, <-flushed)
		t.Fatal("batch 2 was not sent while the removal of batch 1 waited to commit")
	}
	time.Sleep(100 * time.Millisecond) // room for a third write, which must not come
	assert.Equal(t, 2, sink.writes(), "batch 3 sent before the removal of batch 1 committed")
	close(release)
	require.NoError(t, <-holdErr)
	require.NoError(t, <-flushed)

	assert.Equal(t, linesOf(pts), sink.lines(), "every point once, in order")
	assert.Empty(t, pending(t, o))
	assert.Equal(t, float64(len(pts)), testutil.ToFloat64(w.metrics.written))
}

// TestFlushReadsAheadDuringWrite: Flush reads the next batch from the
// state file while the sink is still writing the previous one (a read
// transaction begins during the write), and after the last batch it looks
// once more, so points enqueued during the last write are sent too.
func TestFlushReadsAheadDuringWrite(t *testing.T) {
	db, o, pts := pendingZone(t, 6)
	late := zonePt("z1", 6, 6)
	var readDuringWrite bool
	var start int // read transactions begun before the flush
	sink := &hookSink{hook: func(n int, _ []Point) (int, error) {
		switch n {
		case 1:
			// The flush read batch 1; wait for its read of batch 2.
			deadline := time.Now().Add(10 * time.Second)
			for db.Stats().TxN < start+2 && time.Now().Before(deadline) {
				time.Sleep(time.Millisecond)
			}
			readDuringWrite = db.Stats().TxN >= start+2
		case 3:
			enqueue(t, db, o, late) // during the last write
		}
		return -1, nil
	}}
	w := hookWriter(t, o, sink, 2)
	start = db.Stats().TxN
	require.NoError(t, w.Flush(context.Background()))
	assert.True(t, readDuringWrite, "no read of the next batch while batch 1 was being written")
	assert.Equal(t, linesOf(append(pts, late)), sink.lines())
	assert.Empty(t, pending(t, o))
}

// TestFlushOutageMidway: when the sink fails in the middle of a pipelined
// flush, the batches it accepted before leave the outbox, the points it
// settled of the failing batch too, and everything after stays pending in
// order; the flush itself does not fail.
func TestFlushOutageMidway(t *testing.T) {
	_, o, pts := pendingZone(t, 9)
	sink := &hookSink{hook: func(n int, _ []Point) (int, error) {
		if n == 3 {
			return 1, errors.New("connection refused")
		}
		return -1, nil
	}}
	w := hookWriter(t, o, sink, 3)
	require.NoError(t, w.Flush(context.Background()))
	assert.Equal(t, 3, sink.writes(), "nothing sent after the failure")
	assert.Equal(t, linesOf(pts[7:]), pending(t, o))
	assert.Equal(t, 7.0, testutil.ToFloat64(w.metrics.written))
	assert.Equal(t, 1.0, testutil.ToFloat64(w.metrics.errors))

	sink.hook = nil
	require.NoError(t, w.Flush(context.Background()))
	assert.Empty(t, pending(t, o))
	assert.Equal(t, linesOf(pts), sink.lines()[:9], "first flush in order")
	assert.Equal(t, linesOf(pts[7:]), sink.lines()[9:], "the rest at the retry")
}

// TestDrainLeavesNoIndexEntries: after a drain of zone and raw points, with
// a revision of a point already read, the outbox and its index buckets
// (series, raw) hold exactly the revision, and the count agrees.
func TestDrainLeavesNoIndexEntries(t *testing.T) {
	db := openTestDB(t)
	o := openTestOutbox(t, db, OutboxOptions{Clock: time.Now})
	pts := []Point{zonePt("z1", 0, 1), rawPt(0), zonePt("z1", 1, 2), rawPt(1), rawPt(2), zonePt("z1", 2, 3)}
	enqueue(t, db, o, pts...)
	revised := zonePt("z1", 1, 2.5)
	sink := &hookSink{hook: func(n int, _ []Point) (int, error) {
		if n == 1 {
			// A revision of a point in this batch, made while it is
			// in flight: it must stay pending with its index entries.
			enqueue(t, db, o, revised)
		}
		return -1, nil
	}}
	w := hookWriter(t, o, sink, 3)
	_, err := w.write(context.Background(), mustNext(t, o, 3))
	require.NoError(t, err)
	sink.hook = nil
	require.NoError(t, w.Flush(context.Background()))
	assert.Equal(t, linesOf(append(pts, revised)), sink.lines())
	assert.Empty(t, pending(t, o))

	enqueue(t, db, o, revised) // pending again
	require.NoError(t, db.View(func(tx *bbolt.Tx) error {
		assert.Equal(t, 1, tx.Bucket(bucketOutbox).Stats().KeyN)
		assert.Equal(t, 1, tx.Bucket(bucketSeries).Stats().KeyN)
		assert.Zero(t, tx.Bucket(bucketRaw).Stats().KeyN, "raw index entries left behind")
		return nil
	}))
	depth, _ := o.Stats()
	assert.Equal(t, 1, depth)
}

func mustNext(t *testing.T, o *Outbox, n int) []item {
	t.Helper()
	items, err := o.next(n, 0, time.Time{})
	require.NoError(t, err)
	return items
}

// TestRunSendsWhileRemovalCommits: Run drains a backlog through the same
// pipeline as Flush: it sends the next batch while the removal of the
// previous one waits to commit, and no more than drainWindow batches are
// sent and not yet removed (the bound of what a kill re-sends).
func TestRunSendsWhileRemovalCommits(t *testing.T) {
	db, o, pts := pendingZone(t, 12)

	sink, window, release, holdErr := holdingSink(db, drainWindow)
	w := hookWriter(t, o, sink, 2)
	stop := runWriter(t, w)

	select {
	case <-window:
	case <-time.After(10 * time.Second):
		close(release)
		stop()
		t.Fatalf("Run sent %d batches while the removal of batch 1 waited to commit, want %d", sink.writes(), drainWindow)
	}
	time.Sleep(100 * time.Millisecond) // room for one batch too many, which must not come
	assert.Equal(t, drainWindow, sink.writes(), "more batches sent than a kill may re-send")
	close(release)
	require.NoError(t, <-holdErr)
	waitFor(t, "outbox drained", func() bool { d, _ := o.Stats(); return d == 0 })
	stop()

	assert.Equal(t, linesOf(pts), sink.lines(), "every point once, in order")
	assert.Equal(t, float64(len(pts)), testutil.ToFloat64(w.metrics.written))
}

// TestRunBackfillLetsLivePointsThrough: while Run drains a backlog at the
// backfill rate, a point enqueued meanwhile goes out with the live share of
// a batch, before the backlog is through; every point is sent once.
func TestRunBackfillLetsLivePointsThrough(t *testing.T) {
	db, o, pts := pendingZone(t, 24)
	live := zonePt("z2", 0, 1)
	sink := &hookSink{hook: func(n int, _ []Point) (int, error) {
		if n == 1 {
			enqueue(t, db, o, live)
		}
		return -1, nil
	}}
	w, err := NewWriter(o, WriterOptions{Sink: sink, BatchSize: 4, BackfillRate: 40, Registerer: prometheus.NewRegistry()})
	require.NoError(t, err)
	stop := runWriter(t, w)
	waitFor(t, "outbox drained", func() bool { d, _ := o.Stats(); return d == 0 })
	stop()

	got := sink.lines()
	assert.ElementsMatch(t, linesOf(append(pts, live)), got, "every point once")
	i := slices.Index(got, Line(live))
	assert.Less(t, i, slices.Index(got, Line(pts[len(pts)-1])), "the live point waited for the whole backlog")
	var backlog []string
	for _, l := range got {
		if l != Line(live) {
			backlog = append(backlog, l)
		}
	}
	assert.Equal(t, linesOf(pts), backlog, "the backlog in order")
}

// TestRunBackfillFullBatches: a backlog without live points drains in full
// batches; the live share of a batch left empty goes to the backlog (each
// batch is one removal transaction, with its fsyncs).
func TestRunBackfillFullBatches(t *testing.T) {
	_, o, pts := pendingZone(t, 40)
	sink := &hookSink{}
	w, err := NewWriter(o, WriterOptions{Sink: sink, BatchSize: 8, BackfillRate: 1e9, Registerer: prometheus.NewRegistry()})
	require.NoError(t, err)
	stop := runWriter(t, w)
	waitFor(t, "outbox drained", func() bool { d, _ := o.Stats(); return d == 0 })
	stop()

	assert.Equal(t, linesOf(pts), sink.lines(), "every point once, in order")
	sink.mu.Lock()
	defer sink.mu.Unlock()
	var sizes []int
	for _, b := range sink.batches {
		sizes = append(sizes, len(b))
	}
	assert.Equal(t, []int{8, 8, 8, 8, 8}, sizes, "points per batch")
}
