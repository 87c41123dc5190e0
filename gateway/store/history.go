package store

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"time"

	"go.etcd.io/bbolt"
)

// DefaultHistoryRetention is how long the local history keeps points when no
// retention is configured: a full year, so a season can be compared with the
// last (common practice, no source).
const DefaultHistoryRetention = 366 * 24 * time.Hour

// History is the local history in the state file: every point except raw
// summaries, keyed by time then series, so a revision overwrites the point it
// revises. It is the only destination when no store server is configured and
// always keeps the recent past.
type History struct {
	db        *bbolt.DB
	retention time.Duration
	now       func() time.Time
	log       *slog.Logger
}

// OpenHistory opens the local history of a state file for reading (export).
// It fails when the file holds no history.
func OpenHistory(db *bbolt.DB) (*History, error) {
	err := db.View(func(tx *bbolt.Tx) error {
		if tx.Bucket(bucketHistory) == nil {
			return fmt.Errorf("no local history in this state file")
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("open history: %w", err)
	}
	return newHistory(db, 0, time.Now, nil)
}

func newHistory(db *bbolt.DB, retention time.Duration, now func() time.Time, log *slog.Logger) (*History, error) {
	if retention == 0 {
		retention = DefaultHistoryRetention
	}
	if retention < 0 {
		return nil, fmt.Errorf("history retention must be > 0, got %s", retention)
	}
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	return &History{db: db, retention: retention, now: now, log: log}, nil
}

// Filter selects points of the history.
type Filter struct {
	From, To     time.Time // point time in [From, To); zero To means no upper bound
	Station      string    // when set, only points whose "station" tag equals it
	Measurements []string  // when set, only these measurements
}

func (f Filter) match(p Point) bool {
	if f.Station != "" && p.Tags["station"] != f.Station {
		return false
	}
	if len(f.Measurements) == 0 {
		return true
	}
	for _, m := range f.Measurements {
		if m == p.Measurement {
			return true
		}
	}
	return false
}

// Range calls fn for every point matching f in time order (points of the
// same time in series order). Returning an error from fn stops the scan.
func (h *History) Range(f Filter, fn func(Point) error) error {
	return h.View(func(rng RangeFunc) error { return rng(f, fn) })
}

// RangeFunc scans the points matching a filter, like History.Range.
type RangeFunc func(f Filter, fn func(Point) error) error

// View runs fn with a RangeFunc over one read transaction, so that several
// passes (a CSV header, then its rows) see the same points while the
// gateway writes. Keep it short: a long read transaction delays a writer
// that must grow the file.
func (h *History) View(fn func(rng RangeFunc) error) error {
	err := h.db.View(func(tx *bbolt.Tx) error {
		return fn(func(f Filter, each func(Point) error) error { return rangeTx(tx, f, each) })
	})
	if err != nil {
		return fmt.Errorf("history range: %w", err)
	}
	return nil
}

func rangeTx(tx *bbolt.Tx, f Filter, fn func(Point) error) error {
	b := tx.Bucket(bucketHistory)
	if b == nil {
		return nil
	}
	c := b.Cursor()
	start := appendTimeKey(nil, f.From)
	var end []byte
	if !f.To.IsZero() {
		end = appendTimeKey(nil, f.To)
	}
	for k, v := c.Seek(start); k != nil; k, v = c.Next() {
		if end != nil && string(k[:8]) >= string(end) {
			break
		}
		p, err := decodePoint(v)
		if err != nil {
			return fmt.Errorf("key %x: %w", k, err)
		}
		if !f.match(p) {
			continue
		}
		if err := fn(p); err != nil {
			return err
		}
	}
	return nil
}

// Prune deletes points older than the retention at now, in bounded
// transactions, and returns how many it deleted.
func (h *History) Prune(now time.Time) (int, error) {
	cutoff := appendTimeKey(nil, now.Add(-h.retention))
	total := 0
	for {
		n := 0
		err := h.db.Update(func(tx *bbolt.Tx) error {
			c := tx.Bucket(bucketHistory).Cursor()
			for k, _ := c.First(); k != nil && string(k[:8]) < string(cutoff) && n < 5000; k, _ = c.First() {
				if err := c.Delete(); err != nil {
					return err
				}
				n++
			}
			return nil
		})
		total += n
		if err != nil {
			return total, fmt.Errorf("history prune: %w", err)
		}
		if n < 5000 {
			return total, nil
		}
	}
}

// Run prunes the history at start and then at every hour boundary until ctx
// is done. It is a gateway service.
func (h *History) Run(ctx context.Context) error {
	for {
		now := h.now()
		if n, err := h.Prune(now); err != nil {
			h.log.Error("history: prune", "err", err)
		} else if n > 0 {
			h.log.Info("history: pruned", "points", n, "retention", h.retention.String())
		}
		if n, err := h.PruneQuarantine(now); err != nil {
			h.log.Error("outbox quarantine: prune", "err", err)
		} else if n > 0 {
			h.log.Info("outbox quarantine: pruned", "points", n, "retention", h.retention.String(), "at_most", maxQuarantined)
		}
		// Wake just after the next hour boundary of the (possibly
		// accelerated) clock, but at least every real hour.
		wait := min(max(now.Truncate(time.Hour).Add(time.Hour).Sub(now)+time.Second, time.Second), time.Hour)
		t := time.NewTimer(wait)
		select {
		case <-ctx.Done():
			t.Stop()
			return nil
		case <-t.C:
		}
	}
}

var _ Sink = (*History)(nil)

// Write keeps pts in the history, each replacing the point of the same
// measurement, tags and time, in one transaction. It makes History a Sink:
// a Writer can drain an outbox into the history of another state file (an
// archive on a second disk). A point older than the retention is refused (it
// would be pruned at once), as is a point that fails Validate; raw
// summaries are settled without being kept, as the history never keeps
// them. A failure of the file (closed, disk full) is an outage.
func (h *History) Write(ctx context.Context, pts []Point) (int, []Refusal, error) {
	if err := ctx.Err(); err != nil {
		return 0, nil, fmt.Errorf("history write: %w", err)
	}
	now := h.now()
	var refused []Refusal
	err := h.db.Update(func(tx *bbolt.Tx) error {
		b := tx.Bucket(bucketHistory)
		if b == nil {
			return errors.New("no local history in this state file")
		}
		refused = refused[:0] // a retried transaction starts over
		for i, p := range pts {
			p = normalize(p)
			p.Time = p.Time.UTC()
			err := Validate(p)
			if err == nil {
				err = CheckTime(p.Time, now, 0, h.retention)
			}
			if err != nil {
				refused = append(refused, Refusal{Index: i, Reason: err.Error()})
				continue
			}
			if p.Class == ClassRaw {
				continue
			}
			if err := b.Put(appendSeriesKey(nil, p), appendPoint(nil, p)); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return 0, nil, fmt.Errorf("history write of %d points: %w", len(pts), err)
	}
	return len(pts), refused, nil
}

// Count returns the number of points in the history matching f.
func (h *History) Count(f Filter) (int, error) {
	n := 0
	err := h.Range(f, func(Point) error { n++; return nil })
	return n, err
}
