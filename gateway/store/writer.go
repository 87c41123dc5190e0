package store

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"sync"
	"sync/atomic"
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
// drain; what the live points leave of that quarter goes to the oldest. Reordering cannot change what the store ends up holding: the outbox
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
	w := &Writer{o: o, opt: opt, sink: opt.Sink, log: opt.Logger, metrics: m}
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
//
// Run drains through the same pipeline as Flush, paced by the backfill
// rule: while one batch is written the next is read, and at most two
// batches (drainWindow) are written and not yet removed, so a SIGKILL
// during Run makes the next start send at most two batches again
// (harmless, see Sink).
func (w *Writer) Run(ctx context.Context) error {
	src := &backfill{w: w, tokens: float64(w.opt.BatchSize), last: time.Now(), liveSince: w.o.now()}
	backoff := time.Duration(0)
	for {
		depth, _ := w.o.Stats()
		if depth == 0 {
			if !w.waitForPoints(ctx) {
				break
			}
			continue
		}
		src.after, src.handed = 0, nil
		read, err := w.drain(ctx, src)
		if err != nil {
			if ctx.Err() != nil {
				break
			}
			backoff = nextBackoff(backoff, w.opt.MinBackoff, w.opt.MaxBackoff)
			if !src.fail() {
				w.log.Warn("store: write failed, retrying", "err", err, "pending", depth, "retry_in", backoff.String())
			} else {
				w.log.Debug("store: write failed again", "err", err, "retry_in", backoff.String())
			}
			if !sleep(ctx, backoff) {
				break
			}
			continue
		}
		backoff = 0
		if read == 0 {
			// The depth says points are pending but none could be read:
			// do not spin; wait for the next commit or flush interval.
			if !sleep(ctx, w.opt.FlushInterval) {
				break
			}
		}
	}
	return nil
}

// backfill is the batchSource of Run: the backfill rule of Writer. The
// drain calls next from its reader goroutine and sent from its sender.
type backfill struct {
	w      *Writer
	tokens float64 // head points that may be read now
	last   time.Time

	// Of the current drain (reset by Run before each): the highest
	// sequence number of a head read, and the live points above it
	// handed out already.
	after  uint64
	handed map[uint64]bool

	mu        sync.Mutex
	failing   bool      // writes fail; every pending point counts as backlog
	liveSince time.Time // points enqueued since then count as live
}

var _ batchSource = (*backfill)(nil)

// next reads a full batch when no more than one is pending beyond the
// unremoved points of the drain, else a backlog batch: up to the tokens of
// the backfill rate of the oldest points (waiting for one token) plus a
// quarter of the batch from the live ones.
func (s *backfill) next(ctx context.Context, unremoved int) ([]item, error) {
	w := s.w
	batch := w.opt.BatchSize
	depth, _ := w.o.Stats()
	r := batchRead{after: s.after, skip: s.handed, head: batch}
	backlog := depth-unremoved > batch
	if backlog {
		s.refill()
		if s.tokens < 1 {
			if !sleep(ctx, time.Duration((1-s.tokens)/w.opt.BackfillRate*float64(time.Second))) {
				return nil, ctx.Err()
			}
			s.refill()
		}
		r.head = min(batch, int(s.tokens))
		s.mu.Lock()
		if !s.failing {
			r.live, r.liveSince, r.size = batch/4, s.liveSince, batch
		}
		s.mu.Unlock()
	}
	items, nHead, err := w.o.read(r)
	if err != nil {
		return nil, err
	}
	if nHead > 0 {
		s.after = items[nHead-1].seq
	}
	for seq := range s.handed {
		if seq <= s.after {
			delete(s.handed, seq)
		}
	}
	for _, it := range items[nHead:] {
		if s.handed == nil {
			s.handed = map[uint64]bool{}
		}
		s.handed[it.seq] = true
	}
	if backlog { // its backlog points spend tokens, live ones do not
		for _, it := range items[:nHead] {
			if r.live == 0 || it.enqueued.Before(r.liveSince) {
				s.tokens--
			}
		}
	}
	return items, nil
}

// refill adds the tokens earned since the last refill, up to a batch.
func (s *backfill) refill() {
	now := time.Now()
	s.tokens = min(s.tokens+now.Sub(s.last).Seconds()*s.w.opt.BackfillRate, float64(s.w.opt.BatchSize))
	s.last = now
}

// fail marks writes as failing and reports whether they were already.
func (s *backfill) fail() bool {
	s.mu.Lock()
	defer s.mu.Unlock()
	was := s.failing
	s.failing = true
	return was
}

// sent ends a failure at the first write the sink accepts: the live share
// starts again, with the points enqueued from now on.
func (s *backfill) sent(err error) {
	if err != nil {
		return
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.failing {
		s.failing, s.liveSince = false, s.w.o.now()
		depth, _ := s.w.o.Stats()
		s.w.log.Info("store: writes recovered", "pending", depth)
	}
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
// Flush pipelines its batches as Run does: while one batch is being
// written, the next is read from the state file, and the removal of
// accepted batches commits meanwhile. A SIGKILL during a flush makes the
// next start send at most two batches (drainWindow) again (harmless, see
// Sink).
func (w *Writer) Flush(ctx context.Context) error {
	_, err := w.drain(ctx, &seqSource{o: w.o, n: w.opt.BatchSize})
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

// drainWindow is how many batches a drain may have handed to the sink and
// not yet removed from the outbox: the batch being written and the accepted
// ones whose removal waits to commit. It bounds what a SIGKILL re-sends.
const drainWindow = 2

// batchSource gives a drain its batches, oldest first. The drain calls next
// from one goroutine, one call at a time, and sent from another.
type batchSource interface {
	// next returns the next batch, none when the outbox holds no more
	// for this drain; unremoved is how many points the earlier batches
	// of this drain hold that are not yet removed.
	next(ctx context.Context, unremoved int) ([]item, error)
	// sent tells the outcome of writing a batch (nil: accepted whole).
	sent(err error)
}

// seqSource is the batchSource of Flush: full batches in sequence order.
type seqSource struct {
	o     *Outbox
	n     int
	after uint64 // the highest sequence number read
}

func (s *seqSource) next(context.Context, int) ([]item, error) {
	items, _, err := s.o.read(batchRead{after: s.after, head: s.n})
	if len(items) > 0 {
		s.after = items[len(items)-1].seq
	}
	return items, err
}

func (s *seqSource) sent(error) {}

// drain writes the batches of src until a read after the last write finds
// none, or an error stops it; it returns how many points it read. Three
// goroutines: a reader reads batch k+1 while this one writes batch k, and a
// committer removes accepted batches meanwhile, all those waiting in one
// transaction. A batch is written only when fewer than drainWindow batches
// are written and not yet removed.
func (w *Writer) drain(ctx context.Context, src batchSource) (int, error) {
	var readN, removedN atomic.Int64
	commits := make(chan outcome, drainWindow) // never full: slots bound it
	slots := make(chan struct{}, drainWindow)  // one per batch written and not yet removed
	failed := make(chan struct{})
	committed := make(chan error, 1)
	go func() {
		var err error
		for out := range commits {
			group := []outcome{out}
			for more := true; more; {
				select {
				case o, ok := <-commits:
					if ok {
						group = append(group, o)
					}
					more = ok
				default:
					more = false
				}
			}
			if err == nil { // after a failure, drained so the sender never blocks
				if err = w.commit(group...); err != nil {
					close(failed)
				}
			}
			for _, o := range group {
				removedN.Add(int64(o.n))
				<-slots
			}
		}
		committed <- err
	}()
	type read struct {
		items []item
		err   error
	}
	want, got := make(chan struct{}), make(chan read) // one read outstanding at a time
	go func() {
		defer close(got)
		for range want {
			items, err := src.next(ctx, int(readN.Load()-removedN.Load()))
			readN.Add(int64(len(items)))
			got <- read{items, err}
		}
	}()
	var serr error
	want <- struct{}{}
	raced := false // the outstanding read overlapped a write
	pending := true
	for pending {
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
			want <- struct{}{} // look once more, now that no write is in flight
			continue
		}
		want <- struct{}{}
		raced = true
		select {
		case slots <- struct{}{}:
		case <-failed:
			<-got // the read ahead is not needed
			pending = false
			continue
		}
		var out outcome
		out, serr = w.send(ctx, r.items)
		src.sent(serr)
		out.n = len(r.items)
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
		return int(readN.Load()), err
	}
	return int(readN.Load()), serr
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
	n       int // points in the batch
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

// commit removes the stored points of outs from the outbox and quarantines
// the refused ones, in one transaction.
func (w *Writer) commit(outs ...outcome) error {
	out := outs[0]
	if len(outs) > 1 {
		out = outcome{}
		for _, o := range outs {
			out.ok = append(out.ok, o.ok...)
			out.bad = append(out.bad, o.bad...)
			out.reasons = append(out.reasons, o.reasons...)
		}
	}
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
