package store

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"time"

	"etpulse/gateway/state"
	"etpulse/hourly"

	"github.com/prometheus/client_golang/prometheus"
	"go.etcd.io/bbolt"
)

// Buckets of the state file owned by the store.
var (
	bucketOutbox     = state.BucketOutbox           // seq -> enqueue time (8 bytes) + encoded point
	bucketRaw        = state.BucketOutboxRaw        // seq -> series key, for ClassRaw points only
	bucketSeries     = state.BucketOutboxSeries     // series key -> seq of the pending point
	bucketMeta       = state.BucketOutboxMeta       // "count" -> pending points
	bucketQuarantine = state.BucketOutboxQuarantine // seq -> JSON QuarantinedPoint
	bucketHistory    = state.BucketHistory          // time + series -> encoded point
)

var keyCount = []byte("count")

// Defaults of OutboxOptions.
const (
	DefaultOutboxCap    = 200_000
	DefaultNearCapRatio = 0.8
)

// OutboxOptions configures an Outbox.
type OutboxOptions struct {
	// Cap is the number of pending points above which the oldest ClassRaw
	// points are dropped. Other classes are never dropped: when only they
	// remain, the outbox grows past Cap and NearCap stays true. 0 means
	// DefaultOutboxCap.
	Cap int
	// NearCapRatio is the fill fraction at which NearCap reports true;
	// 0 means DefaultNearCapRatio.
	NearCapRatio float64
	// LocalOnly keeps points in the local history only: no store server is
	// configured, so nothing is queued for one.
	LocalOnly bool
	// RawSummaries makes HandleHour also enqueue the per-quantity summaries
	// of RawPoints.
	RawSummaries bool
	// HistoryRetention is how long the local history keeps points, by point
	// time; 0 means DefaultHistoryRetention.
	HistoryRetention time.Duration

	Logger     *slog.Logger          // nil: discard
	Registerer prometheus.Registerer // nil: metrics are not registered
	Clock      func() time.Time      // nil: time.Now
}

// Outbox is the durable queue of points bound for the store, kept in the
// gateway's state file. Producers enqueue inside their own transaction, so a
// state change and its records commit together; the Writer removes points
// only after the store accepted them. An Outbox is safe for concurrent use.
type Outbox struct {
	db      *bbolt.DB
	opt     OutboxOptions
	log     *slog.Logger
	now     func() time.Time
	history *History
	metrics *outboxMetrics
	notify  chan struct{}

	// capMu guards the cap episode: the log says when dropping starts and
	// when the outbox is below its cap again, not at every enqueue.
	capMu      sync.Mutex
	dropping   bool
	dropsSince int // raw summaries dropped in the current episode
}

var _ Enqueuer = (*Outbox)(nil)

// OpenOutbox creates the store's buckets in db when missing and returns the
// outbox. It registers the outbox metrics with opt.Registerer.
func OpenOutbox(db *bbolt.DB, opt OutboxOptions) (*Outbox, error) {
	if opt.Cap == 0 {
		opt.Cap = DefaultOutboxCap
	}
	if opt.Cap < 0 {
		return nil, fmt.Errorf("open outbox: cap must be > 0, got %d", opt.Cap)
	}
	if opt.NearCapRatio == 0 {
		opt.NearCapRatio = DefaultNearCapRatio
	}
	if opt.NearCapRatio < 0 || opt.NearCapRatio > 1 {
		return nil, fmt.Errorf("open outbox: near-cap ratio must be in (0, 1], got %g", opt.NearCapRatio)
	}
	if opt.Logger == nil {
		opt.Logger = slog.New(slog.DiscardHandler)
	}
	if opt.Clock == nil {
		opt.Clock = time.Now
	}
	err := db.Update(func(tx *bbolt.Tx) error {
		for _, b := range [][]byte{bucketOutbox, bucketRaw, bucketSeries, bucketMeta, bucketQuarantine, bucketHistory} {
			if _, err := tx.CreateBucketIfNotExists(b); err != nil {
				return fmt.Errorf("bucket %s: %w", b, err)
			}
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("open outbox: %w", err)
	}
	h, err := newHistory(db, opt.HistoryRetention, opt.Clock, opt.Logger)
	if err != nil {
		return nil, fmt.Errorf("open outbox: %w", err)
	}
	o := &Outbox{
		db:      db,
		opt:     opt,
		log:     opt.Logger,
		now:     opt.Clock,
		history: h,
		notify:  make(chan struct{}, 1),
	}
	o.metrics, err = newOutboxMetrics(o, opt.Registerer)
	if err != nil {
		return nil, fmt.Errorf("open outbox: %w", err)
	}
	return o, nil
}

// History returns the local history the outbox appends to.
func (o *Outbox) History() *History { return o.history }

// HandleHour enqueues the points of a closed or revised hour (HourPoints,
// plus RawPoints when raw summaries are on) inside the transaction that
// closes it. A revision overwrites the earlier point in the store and in the
// local history (same measurement, tags and time).
func (o *Outbox) HandleHour(tx *bbolt.Tx, rec hourly.Record) error {
	pts := HourPoints(rec)
	if o.opt.RawSummaries {
		pts = append(pts, RawPoints(rec)...)
	}
	return o.Enqueue(tx, pts...)
}

// enqueueResult collects what one Enqueue did, applied to metrics and logs
// only when the transaction commits.
type enqueueResult struct {
	queued      int
	quarantined []string // reasons
	dropped     int      // ClassRaw points dropped by the cap
	depth       uint64   // points pending after the enqueue
}

// Enqueue commits points to the outbox inside the caller's write transaction
// tx, and every point except ClassRaw to the local history. A point that
// fails Validate is moved to the quarantine with the reason (counted and
// logged once tx commits) and never fails the transaction; only storage
// errors are returned. A pending point with the same measurement, tags and
// time is replaced (a revision supersedes the earlier emission).
func (o *Outbox) Enqueue(tx *bbolt.Tx, pts ...Point) error {
	if len(pts) == 0 {
		return nil
	}
	if !tx.Writable() {
		return errors.New("enqueue: read-only transaction")
	}
	q, err := openBuckets(tx)
	if err != nil {
		return fmt.Errorf("enqueue: %w", err)
	}
	now := o.now()
	var res enqueueResult
	var buf, skey []byte
	for _, p := range pts {
		p = normalize(p)
		p.Time = p.Time.UTC()
		if err := Validate(p); err != nil {
			if err := q.quarantine(now, p, err.Error()); err != nil {
				return fmt.Errorf("enqueue: %w", err)
			}
			res.quarantined = append(res.quarantined, err.Error())
			continue
		}
		buf = binary.BigEndian.AppendUint64(buf[:0], uint64(now.UnixNano()))
		buf = appendPoint(buf, p)
		skey = appendSeriesKey(skey[:0], p)
		if p.Class != ClassRaw {
			if err := q.history.Put(bytes.Clone(skey), bytes.Clone(buf[8:])); err != nil {
				return fmt.Errorf("enqueue: history: %w", err)
			}
		}
		if o.opt.LocalOnly {
			continue
		}
		if err := q.add(skey, buf, p.Class == ClassRaw); err != nil {
			return fmt.Errorf("enqueue: %w", err)
		}
		res.queued++
	}
	for q.count > uint64(o.opt.Cap) {
		ok, err := q.dropOldestRaw()
		if err != nil {
			return fmt.Errorf("enqueue: %w", err)
		}
		if !ok {
			break
		}
		res.dropped++
	}
	if err := q.saveCount(); err != nil {
		return fmt.Errorf("enqueue: %w", err)
	}
	res.depth = q.count
	tx.OnCommit(func() { o.committed(res) })
	return nil
}

func (o *Outbox) committed(res enqueueResult) {
	if n := len(res.quarantined); n > 0 {
		o.metrics.quarantined.Add(float64(n))
		for i, r := range res.quarantined {
			if i == 5 {
				o.log.Warn("outbox: more points quarantined", "count", n-i)
				break
			}
			o.log.Warn("outbox: point quarantined", "reason", r)
		}
	}
	if res.dropped > 0 {
		o.metrics.dropped.WithLabelValues(string(ClassRaw)).Add(float64(res.dropped))
	}
	o.capEpisode(res)
	if res.queued > 0 {
		select {
		case o.notify <- struct{}{}:
		default:
		}
	}
}

// capEpisode logs the start of dropping at the cap once, and its end (the
// first enqueue that leaves the outbox below its cap) with the count
// dropped meanwhile; the drops in between are counted by the metric only.
func (o *Outbox) capEpisode(res enqueueResult) {
	o.capMu.Lock()
	defer o.capMu.Unlock()
	switch {
	case res.dropped > 0 && !o.dropping:
		o.dropping, o.dropsSince = true, res.dropped
		o.log.Warn("outbox: cap reached, oldest raw summaries dropped until the store catches up (logged again when below the cap)",
			"cap", o.opt.Cap, "dropped", res.dropped)
	case res.dropped > 0:
		o.dropsSince += res.dropped
	case o.dropping && res.depth < uint64(o.opt.Cap):
		o.log.Info("outbox: below its cap again", "cap", o.opt.Cap, "depth", res.depth, "dropped", o.dropsSince)
		o.dropping, o.dropsSince = false, 0
	}
}

// Stats returns the number of pending points and how long the oldest of them
// has waited (0 when empty).
func (o *Outbox) Stats() (depth int, oldest time.Duration) {
	err := o.db.View(func(tx *bbolt.Tx) error {
		depth = int(readCount(tx.Bucket(bucketMeta)))
		k, v := tx.Bucket(bucketOutbox).Cursor().First()
		if k != nil && len(v) >= 8 {
			at := time.Unix(0, int64(binary.BigEndian.Uint64(v)))
			oldest = max(o.now().Sub(at), 0)
		}
		return nil
	})
	if err != nil {
		o.log.Error("outbox: stats", "err", err)
	}
	return depth, oldest
}

// Cap returns the configured size cap.
func (o *Outbox) Cap() int { return o.opt.Cap }

// NearCap reports whether the outbox holds at least the near-cap fraction of
// its cap: the signal for an alert before raw summaries start to be dropped
// (or, when only undroppable points remain, before the file grows unbounded).
func (o *Outbox) NearCap() bool {
	depth, _ := o.Stats()
	return float64(depth) >= o.opt.NearCapRatio*float64(o.opt.Cap)
}

// QuarantinedPoint is a point the store will never accept as it is.
type QuarantinedPoint struct {
	At     time.Time `json:"at"`     // when it was quarantined
	Reason string    `json:"reason"` // validation error or the server's answer
	Class  Class     `json:"class"`
	Point  string    `json:"point"` // line protocol when valid, else a readable rendering
}

// Quarantine calls fn for every quarantined point, oldest first.
func (o *Outbox) Quarantine(fn func(QuarantinedPoint) error) error {
	return o.db.View(func(tx *bbolt.Tx) error {
		return tx.Bucket(bucketQuarantine).ForEach(func(_, v []byte) error {
			var q QuarantinedPoint
			if err := json.Unmarshal(v, &q); err != nil {
				return fmt.Errorf("quarantine: %w", err)
			}
			return fn(q)
		})
	})
}

// buckets is the set of store buckets inside one transaction, with the
// pending-point count loaded.
type buckets struct {
	outbox, raw, series, meta, quarantineB, history *bbolt.Bucket
	count                                           uint64
}

// historyFillPercent is how full the history's pages are filled on a split.
const historyFillPercent = 0.95

func openBuckets(tx *bbolt.Tx) (*buckets, error) {
	q := &buckets{
		outbox:      tx.Bucket(bucketOutbox),
		raw:         tx.Bucket(bucketRaw),
		series:      tx.Bucket(bucketSeries),
		meta:        tx.Bucket(bucketMeta),
		quarantineB: tx.Bucket(bucketQuarantine),
		history:     tx.Bucket(bucketHistory),
	}
	if q.outbox == nil || q.raw == nil || q.series == nil || q.meta == nil || q.quarantineB == nil || q.history == nil {
		return nil, errors.New("store buckets missing (outbox not opened on this file)")
	}
	// History keys begin with the point's time and mostly arrive in time
	// order: full pages instead of bbolt's half-full splits keep the file
	// near its in-use size (common practice for append-mostly bbolt keys,
	// no source; measured in TestStateFileSizePerStationYear).
	q.history.FillPercent = historyFillPercent
	q.count = readCount(q.meta)
	return q, nil
}

func readCount(meta *bbolt.Bucket) uint64 {
	if v := meta.Get(keyCount); len(v) == 8 {
		return binary.BigEndian.Uint64(v)
	}
	return 0
}

func (q *buckets) saveCount() error {
	return q.meta.Put(keyCount, binary.BigEndian.AppendUint64(nil, q.count))
}

// add queues one encoded value under a new sequence key, replacing a pending
// point of the same series key.
func (q *buckets) add(skey, value []byte, raw bool) error {
	if old := q.series.Get(skey); len(old) == 8 {
		if err := q.remove(binary.BigEndian.Uint64(old), skey); err != nil {
			return err
		}
	}
	seq, err := q.outbox.NextSequence()
	if err != nil {
		return err
	}
	k := seqKey(seq)
	if err := q.outbox.Put(k, bytes.Clone(value)); err != nil {
		return err
	}
	if err := q.series.Put(bytes.Clone(skey), k); err != nil {
		return err
	}
	if raw {
		if err := q.raw.Put(k, bytes.Clone(skey)); err != nil {
			return err
		}
	}
	q.count++
	return nil
}

// remove deletes the pending point seq (a no-op when it is gone already).
func (q *buckets) remove(seq uint64, skey []byte) error {
	k := seqKey(seq)
	if q.outbox.Get(k) == nil {
		return nil
	}
	if err := q.outbox.Delete(k); err != nil {
		return err
	}
	if v := q.series.Get(skey); bytes.Equal(v, k) {
		if err := q.series.Delete(skey); err != nil {
			return err
		}
	}
	if err := q.raw.Delete(k); err != nil {
		return err
	}
	if q.count > 0 {
		q.count--
	}
	return nil
}

func (q *buckets) dropOldestRaw() (bool, error) {
	k, skey := q.raw.Cursor().First()
	if k == nil {
		return false, nil
	}
	seq := binary.BigEndian.Uint64(k)
	return true, q.remove(seq, bytes.Clone(skey))
}

func (q *buckets) quarantine(now time.Time, p Point, reason string) error {
	qp := QuarantinedPoint{At: now.UTC(), Reason: reason, Class: p.Class}
	if Validate(p) == nil {
		qp.Point = Line(p)
	} else {
		qp.Point = fmt.Sprintf("%s tags=%v fields=%v time=%s", p.Measurement, p.Tags, p.Fields, p.Time.Format(time.RFC3339Nano))
	}
	v, err := json.Marshal(qp)
	if err != nil {
		return fmt.Errorf("quarantine: %w", err)
	}
	seq, err := q.quarantineB.NextSequence()
	if err != nil {
		return fmt.Errorf("quarantine: %w", err)
	}
	return q.quarantineB.Put(seqKey(seq), v)
}

func seqKey(seq uint64) []byte { return binary.BigEndian.AppendUint64(make([]byte, 0, 8), seq) }

// appendSeriesKey appends the key that identifies a point in the store: its
// time (8 bytes, ordered) followed by measurement and sorted tags. Two points
// with the same key overwrite each other in the store.
func appendSeriesKey(dst []byte, p Point) []byte {
	dst = appendTimeKey(dst, p.Time)
	return appendSeries(dst, p.Measurement, p.Tags)
}

// appendTimeKey appends t as 8 bytes that sort in time order, negative Unix
// times included.
func appendTimeKey(dst []byte, t time.Time) []byte {
	return binary.BigEndian.AppendUint64(dst, uint64(t.UnixNano())^(1<<63))
}
