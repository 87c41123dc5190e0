package store

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// Defaults of WriterOptions.
const (
	DefaultBatchSize     = 500
	DefaultFlushInterval = time.Second
	DefaultMinBackoff    = 500 * time.Millisecond
	DefaultMaxBackoff    = 5 * time.Minute
	DefaultBackfillRate  = 1000 // points per second
	DefaultMaxFuture     = 48 * time.Hour
	DefaultWriteTimeout  = 30 * time.Second
)

// WriterOptions configures a Writer.
type WriterOptions struct {
	// Sink receives the points. When nil, the writer builds an InfluxSink
	// from URL, Org, Bucket, Token, MaxFuture, MaxAge and WriteTimeout, and
	// closes it in Close; those fields must then be empty when Sink is set.
	Sink Sink

	URL    string // base URL of a server with the InfluxDB v2 write API
	Org    string
	Bucket string
	Token  string

	BatchSize     int           // points per write request; 0: DefaultBatchSize
	FlushInterval time.Duration // wait after new points arrive, to batch them; 0: DefaultFlushInterval
	MinBackoff    time.Duration // first retry delay after an error; 0: DefaultMinBackoff
	MaxBackoff    time.Duration // cap of the exponential retry delay; 0: DefaultMaxBackoff
	// BackfillRate bounds, in points per second, how fast a backlog (more
	// than one batch pending) drains; live points are exempt. 0: DefaultBackfillRate.
	BackfillRate float64
	// MaxFuture quarantines points further ahead of the clock; 0: DefaultMaxFuture.
	MaxFuture time.Duration
	// MaxAge quarantines points older than the server's retention; 0: no limit.
	MaxAge       time.Duration
	WriteTimeout time.Duration // per request; 0: DefaultWriteTimeout

	Logger     *slog.Logger          // nil: discard
	Registerer prometheus.Registerer // nil: metrics are not registered
}

// Sink is where the outbox drain sends points: the store server, or any
// other destination. The drain removes a point from the outbox once the
// sink settled it (stored or refused) and moves refused points to the
// quarantine; it retries everything else after an outage.
//
// A sink may see a point again after an outage cut a write short (the
// points in flight are re-sent); points with the same measurement, tags and
// time carry the same or a newer value, so storing one again is harmless.
type Sink interface {
	// Write stores pts in order. It returns settled, how many points from
	// the start of pts are dealt with (stored or refused), and the refused
	// ones among them: points the sink will never accept as they are, with
	// the reason. A non-nil error is an outage: pts[settled:] were not
	// stored and are retried unchanged later. On success settled is len(pts).
	Write(ctx context.Context, pts []Point) (settled int, refused []Refusal, err error)
}

// Refusal is a point a Sink will never accept as it is.
type Refusal struct {
	Index  int    // position in the batch given to Write
	Reason string // the sink's answer, kept with the point in the quarantine
}

// errServer marks a failed write to the sink (as opposed to the state file).
var errServer = errors.New("store server")

// Writer drains an Outbox to a Sink in batches, oldest first. It is a
// gateway service: Run loops until its context ends.
//
// Backfill rule: while more than one batch is pending, each batch is made of
// the oldest points, at most BackfillRate per second, plus up to a quarter of
// the batch taken from the newest points enqueued since the writer last
// recovered (live points), so current data keeps flowing during a long
// drain. Reordering cannot change what the store ends up holding: the outbox
// keeps at most one pending point per measurement, tags and time (a revision
// replaces the pending earlier emission), so no two points in flight ever
// overwrite each other.
type Writer struct {
	o       *Outbox
	opt     WriterOptions
	sink    Sink
	closer  func() // closes a sink the writer built; nil otherwise
	log     *slog.Logger
	metrics *writerMetrics

	liveSince time.Time // points enqueued since then count as live
}

// NewWriter returns a writer of o's points to opt.Sink, or to the server at
// opt.URL when no sink is given. It does not contact the server.
func NewWriter(o *Outbox, opt WriterOptions) (*Writer, error) {
	if o.opt.LocalOnly {
		return nil, errors.New("new writer: the outbox keeps local history only")
	}
	influx := InfluxOptions{URL: opt.URL, Org: opt.Org, Bucket: opt.Bucket, Token: opt.Token,
		MaxFuture: opt.MaxFuture, MaxAge: opt.MaxAge, WriteTimeout: opt.WriteTimeout}
	if opt.Sink != nil && (opt.URL != "" || opt.Org != "" || opt.Bucket != "" || opt.Token != "" ||
		opt.MaxFuture != 0 || opt.MaxAge != 0 || opt.WriteTimeout != 0) {
		return nil, fmt.Errorf("new writer: both a sink and store server options (url %q) given; set one", opt.URL)
	}
	if opt.Sink == nil && opt.URL == "" {
		return nil, errors.New("new writer: no store url")
	}
	setDefault(&opt.BatchSize, DefaultBatchSize)
	setDefault(&opt.FlushInterval, DefaultFlushInterval)
	setDefault(&opt.MinBackoff, DefaultMinBackoff)
	setDefault(&opt.MaxBackoff, DefaultMaxBackoff)
	setDefault(&opt.BackfillRate, DefaultBackfillRate)
	if opt.Sink == nil {
		setDefault(&opt.MaxFuture, DefaultMaxFuture)
		setDefault(&opt.WriteTimeout, DefaultWriteTimeout)
	}
	if opt.BatchSize < 1 {
		return nil, fmt.Errorf("new writer: batch size must be > 0, got %d", opt.BatchSize)
	}
	if opt.BackfillRate < 0 {
		return nil, fmt.Errorf("new writer: backfill rate must be > 0, got %g", opt.BackfillRate)
	}
	if opt.Logger == nil {
		opt.Logger = slog.New(slog.DiscardHandler)
	}
	m, err := newWriterMetrics(opt.Registerer)
	if err != nil {
		return nil, fmt.Errorf("new writer: %w", err)
	}
	w := &Writer{o: o, opt: opt, sink: opt.Sink, log: opt.Logger, metrics: m, liveSince: o.now()}
	if w.sink == nil {
		influx.Clock = o.now
		s, err := NewInfluxSink(influx)
		if err != nil {
			return nil, fmt.Errorf("new writer: %w", err)
		}
		w.sink, w.closer = s, s.Close
	}
	return w, nil
}

func setDefault[T comparable](v *T, d T) {
	var zero T
	if *v == zero {
		*v = d
	}
}

// Run drains the outbox until ctx ends. For a last drain at shutdown call
// Flush with a bounded context afterwards (the gateway does: Writer is a
// Flusher). What stays unwritten remains in the outbox for the next start.
func (w *Writer) Run(ctx context.Context) error {
	tokens := float64(w.opt.BatchSize)
	last := time.Now()
	backoff := time.Duration(0)
	failing := false
	for {
		depth, _ := w.o.Stats()
		if depth == 0 {
			if !w.waitForPoints(ctx) {
				break
			}
			continue
		}
		now := time.Now()
		tokens = min(tokens+now.Sub(last).Seconds()*w.opt.BackfillRate, float64(w.opt.BatchSize))
		last = now
		head, live := w.opt.BatchSize, 0
		backlog := depth > w.opt.BatchSize
		if backlog {
			head = min(w.opt.BatchSize, int(tokens))
			if !failing {
				// While writes fail, every pending point is backlog;
				// the live share starts again after the recovery.
				live = w.opt.BatchSize / 4
				head = min(w.opt.BatchSize-live, int(tokens))
			}
		}
		n, err := w.step(ctx, head, live)
		if err != nil {
			if ctx.Err() != nil {
				break
			}
			backoff = nextBackoff(backoff, w.opt.MinBackoff, w.opt.MaxBackoff)
			if !failing {
				w.log.Warn("store: write failed, retrying", "err", err, "pending", depth, "retry_in", backoff.String())
			} else {
				w.log.Debug("store: write failed again", "err", err, "retry_in", backoff.String())
			}
			failing = true
			if !sleep(ctx, backoff) {
				break
			}
			continue
		}
		if failing {
			w.log.Info("store: writes recovered", "pending", depth)
			failing = false
			w.liveSince = w.o.now()
		}
		backoff = 0
		if n.read == 0 && head > 0 {
			// The depth says points are pending but none could be read:
			// do not spin; wait for the next commit or flush interval.
			if !sleep(ctx, w.opt.FlushInterval) {
				break
			}
			continue
		}
		if backlog {
			tokens -= float64(n.head)
			if tokens < 1 {
				wait := time.Duration((1 - tokens) / w.opt.BackfillRate * float64(time.Second))
				if !sleep(ctx, wait) {
					break
				}
			}
		}
	}
	return nil
}

// Close releases the connections of the sink the writer built (a sink given
// in WriterOptions is the caller's to close). Call it after Run and Flush.
func (w *Writer) Close() {
	if w.closer != nil {
		w.closer()
	}
}

// waitForPoints waits until new points are committed, then lets FlushInterval
// pass so a burst goes out as one batch. It reports false when ctx ended.
func (w *Writer) waitForPoints(ctx context.Context) bool {
	select {
	case <-ctx.Done():
		return false
	case <-w.o.notify:
	}
	if d, _ := w.o.Stats(); d >= w.opt.BatchSize {
		return true
	}
	return sleep(ctx, w.opt.FlushInterval)
}

// Flush writes every pending point, ignoring the backfill rate, until the
// outbox is empty, a write fails or ctx ends. A failed write to the server
// is logged, not returned: the points stay in the outbox for the next start,
// which is no failure of a shutdown. Errors of the state file are returned.
//
// Flush pipelines its batches: while one batch is being written, the next
// is read from the state file, and while the removal of an accepted batch
// commits, the next is written. At most one accepted batch waits for its
// removal while the next is in flight, so a SIGKILL during a flush makes
// the next start send at most two batches again (harmless, see Sink).
func (w *Writer) Flush(ctx context.Context) error {
	err := w.drain(ctx)
	if errors.Is(err, errServer) {
		depth, _ := w.o.Stats()
		w.log.Warn("store: flush stopped; points stay in the outbox", "pending", depth, "err", err)
		return nil
	}
	if err != nil {
		return fmt.Errorf("flush: %w", err)
	}
	return nil
}

// drain writes batches, oldest first, until a read after the last write
// finds the outbox empty, or an error stops it. Three goroutines: a reader
// reads batch k+1 while this one writes batch k, and a committer removes
// batch k-1 meanwhile. The hand-over to the committer is unbuffered, so
// batch k+1 is not written before batch k-1's removal committed.
func (w *Writer) drain(ctx context.Context) error {
	commits := make(chan outcome)
	failed := make(chan struct{})
	committed := make(chan error, 1)
	go func() {
		var err error
		for out := range commits {
			if err != nil {
				continue // drained after a failure so the sender never blocks
			}
			if err = w.commit(out); err != nil {
				close(failed)
			}
		}
		committed <- err
	}()
	type read struct {
		items []item
		err   error
	}
	want, got := make(chan uint64), make(chan read) // one read outstanding at a time
	go func() {
		defer close(got)
		for after := range want {
			items, err := w.o.nextAfter(after, w.opt.BatchSize)
			got <- read{items, err}
		}
	}()
	var after uint64
	var serr error
	want <- after
	raced := false // the outstanding read overlapped a write
	for {
		r := <-got
		if r.err != nil {
			serr = r.err
			break
		}
		if len(r.items) == 0 || isClosed(failed) {
			if !raced || isClosed(failed) {
				break
			}
			raced = false
			want <- after // look once more, now that no write is in flight
			continue
		}
		after = r.items[len(r.items)-1].seq
		want <- after
		raced = true
		var out outcome
		out, serr = w.send(ctx, r.items)
		commits <- out
		if serr != nil {
			<-got // the read ahead is not needed
			break
		}
	}
	close(want)
	for range got { // the reader has ended
	}
	close(commits)
	if err := <-committed; err != nil {
		return err
	}
	return serr
}

// stepCount tells what one step did: points read from the outbox, how many
// of them were backlog (not live), and how many the store accepted.
type stepCount struct{ read, head, written int }

// step writes one batch of up to head oldest and live newest points.
func (w *Writer) step(ctx context.Context, head, live int) (stepCount, error) {
	items, err := w.o.next(head, live, w.liveSince)
	if err != nil {
		return stepCount{}, err
	}
	nHead := len(items)
	if live > 0 {
		nHead = 0
		for _, it := range items {
			if it.enqueued.Before(w.liveSince) {
				nHead++
			}
		}
	}
	written, err := w.write(ctx, items)
	return stepCount{read: len(items), head: nHead, written: written}, err
}

// isClosed reports whether ch is closed, without waiting.
func isClosed(ch <-chan struct{}) bool {
	select {
	case <-ch:
		return true
	default:
		return false
	}
}

// outcome is what the sink did with one batch: the points it stored, and
// those it refused with the reasons (reasons[i] for bad[i]). Points left
// unsettled by an outage are in neither.
type outcome struct {
	ok, bad []item
	reasons []string
}

// write hands items to the sink, then in one transaction removes the points
// it stored from the outbox and moves the ones it refused to the quarantine.
// Points left unsettled by an outage stay pending.
func (w *Writer) write(ctx context.Context, items []item) (int, error) {
	if len(items) == 0 {
		return 0, nil
	}
	out, serr := w.send(ctx, items)
	if err := w.commit(out); err != nil {
		return 0, err
	}
	return len(out.ok), serr
}

// send hands items to the sink and sorts them by what it did. A failed write
// is returned wrapped in errServer, with the outcome of the points the sink
// settled before it failed.
func (w *Writer) send(ctx context.Context, items []item) (outcome, error) {
	start := time.Now()
	settled, refused, werr, err := w.sinkWrite(ctx, items)
	if err != nil {
		return outcome{}, err
	}
	w.metrics.duration.Observe(time.Since(start).Seconds())
	if werr != nil {
		w.metrics.errors.Inc()
	} else {
		settled = len(items)
	}
	if settled < 0 || settled > len(items) {
		return outcome{}, fmt.Errorf("%w: sink settled %d points of a batch of %d", errServer, settled, len(items))
	}
	isBad := make([]bool, settled)
	var out outcome
	for _, r := range refused {
		if r.Index < 0 || r.Index >= settled || isBad[r.Index] {
			return outcome{}, fmt.Errorf("%w: sink refused point %d of %d settled (out of range or twice)", errServer, r.Index, settled)
		}
		isBad[r.Index] = true
		out.bad = append(out.bad, items[r.Index])
		out.reasons = append(out.reasons, r.Reason)
	}
	out.ok = make([]item, 0, settled-len(out.bad))
	for i, it := range items[:settled] {
		if !isBad[i] {
			out.ok = append(out.ok, it)
		}
	}
	if werr != nil {
		return out, fmt.Errorf("%w: write %d points: %w", errServer, len(items)-settled, werr)
	}
	return out, nil
}

// lineSink is a Sink that also takes points as the drain renders them,
// lines[i] being the line of the point at times[i], so the drain need not
// build Points (InfluxSink).
type lineSink interface {
	writeLines(ctx context.Context, times []time.Time, lines [][]byte) (settled int, refused []Refusal, err error)
}

// sinkWrite hands items to the sink, as lines when it takes them. err is a
// pending point that cannot be decoded (a fault of the state file).
func (w *Writer) sinkWrite(ctx context.Context, items []item) (settled int, refused []Refusal, werr, err error) {
	if ls, ok := w.sink.(lineSink); ok {
		times := make([]time.Time, len(items))
		lines := make([][]byte, len(items))
		for i, it := range items {
			times[i], lines[i] = it.time, it.line
		}
		settled, refused, werr = ls.writeLines(ctx, times, lines)
		return settled, refused, werr, nil
	}
	pts := make([]Point, len(items))
	for i, it := range items {
		if pts[i], err = it.decode(); err != nil {
			return 0, nil, nil, fmt.Errorf("drain: point %d: %w", it.seq, err)
		}
	}
	settled, refused, werr = w.sink.Write(ctx, pts)
	return settled, refused, werr, nil
}

// commit removes the stored points of out from the outbox and quarantines
// the refused ones, in one transaction.
func (w *Writer) commit(out outcome) error {
	if err := w.o.done(out.ok, out.bad, out.reasons); err != nil {
		return err
	}
	w.metrics.written.Add(float64(len(out.ok)))
	return nil
}

// nextBackoff doubles the previous delay up to max, with jitter of up to a
// quarter so several gateways do not retry in step.
func nextBackoff(prev, minD, maxD time.Duration) time.Duration {
	d := min(max(prev*2, minD), maxD)
	return d - time.Duration(rand.Int64N(int64(d)/4+1))
}

func sleep(ctx context.Context, d time.Duration) bool {
	if d <= 0 {
		return ctx.Err() == nil
	}
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-ctx.Done():
		return false
	case <-t.C:
		return true
	}
}
