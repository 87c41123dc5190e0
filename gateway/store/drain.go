package store

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"math"
	"slices"
	"time"

	"go.etcd.io/bbolt"
)

// item is one pending point read from the outbox for writing. Its slices
// share one buffer per batch.
type item struct {
	seq      uint64
	enqueued time.Time
	time     time.Time // the point's time
	raw      bool      // a ClassRaw point
	skey     []byte    // series key, see appendSeriesKey
	line     []byte    // line protocol, rendered from enc
	enc      []byte    // the stored encoding; decoded only where a Point is needed
}

// decode returns the item's point.
func (it item) decode() (Point, error) { return decodePoint(it.enc) }

// readItem renders one outbox entry, appending its line, series key and
// encoding to *buf; ok is false when it cannot be decoded.
func readItem(k, v []byte, buf *[]byte) (it item, ok bool) {
	it.seq = binary.BigEndian.Uint64(k)
	if len(v) < 8 {
		return it, false
	}
	a := *buf
	start := len(a)
	a, info, err := appendLineEncoded(a, v[8:])
	if err != nil {
		return it, false
	}
	lineEnd := len(a)
	a = appendTimeKey(a, info.time)
	a = append(a, a[start:start+info.series]...) // the series opens the line
	skeyEnd := len(a)
	a = append(a, v[8:]...)
	it.line, it.skey, it.enc = a[start:lineEnd:lineEnd], a[lineEnd:skeyEnd:skeyEnd], a[skeyEnd:len(a):len(a)]
	it.time, it.raw = info.time, info.raw
	it.enqueued = time.Unix(0, int64(binary.BigEndian.Uint64(v)))
	*buf = a
	return it, true
}

// batchBuffer returns a buffer for the items of a batch of n points.
func batchBuffer(n int) []byte { return make([]byte, 0, min(n, 1<<12)*256) }

// batchRead says which pending points a read of the drain takes.
type batchRead struct {
	after uint64          // only points with a higher sequence number
	skip  map[uint64]bool // and none of these (live points handed out already)
	head  int             // up to head of the oldest of them
	// live: up to live of the newest ones enqueued at or after liveSince,
	// above the head (the live share of a batch during a backfill).
	live      int
	liveSince time.Time
	// size, when > 0, bounds the batch: the head takes what the live
	// share leaves of it (so a batch without live points is full).
	size int
}

// next reads up to maxHead of the oldest pending points and, when more are
// pending, up to maxLive of the newest ones enqueued at or after liveSince.
func (o *Outbox) next(maxHead, maxLive int, liveSince time.Time) ([]item, error) {
	items, _, err := o.read(batchRead{head: maxHead, live: maxLive, liveSince: liveSince})
	return items, err
}

// read reads the points r selects, in sequence order: the nHead points of
// the head first, then the live tail. A point that cannot be decoded is
// quarantined on the spot.
func (o *Outbox) read(r batchRead) (items []item, nHead int, err error) {
	var corrupt []uint64
	err = o.db.View(func(tx *bbolt.Tx) error {
		c := tx.Bucket(bucketOutbox).Cursor()
		buf := batchBuffer(max(r.head+r.live, r.size))
		take := func(k, v []byte) {
			if it, ok := readItem(k, v, &buf); ok {
				items = append(items, it)
			} else {
				corrupt = append(corrupt, it.seq)
			}
		}
		// The live tail first, newest first, so the head knows its room.
		var ceiling uint64 = math.MaxUint64 // the head takes only points below the tail
		n := 0
		for k, v := c.Last(); k != nil && n < r.live && binary.BigEndian.Uint64(k) > r.after; k, v = c.Prev() {
			if len(v) >= 8 && int64(binary.BigEndian.Uint64(v)) < r.liveSince.UnixNano() {
				break
			}
			seq := binary.BigEndian.Uint64(k)
			if r.skip[seq] {
				continue
			}
			take(k, v)
			ceiling = seq
			n++
		}
		tail := items
		slices.Reverse(tail)
		items = nil
		head := r.head
		if r.size > 0 {
			head = min(head, r.size-n)
		}
		n = 0
		for k, v := c.Seek(seqKey(r.after + 1)); k != nil && n < head; k, v = c.Next() {
			seq := binary.BigEndian.Uint64(k)
			if seq >= ceiling {
				break
			}
			if r.skip[seq] {
				continue
			}
			take(k, v)
			n++
		}
		nHead = len(items)
		items = append(items, tail...)
		return nil
	})
	if err != nil {
		return nil, 0, fmt.Errorf("outbox read after %d: %w", r.after, err)
	}
	if len(corrupt) > 0 {
		if err := o.dropCorrupt(corrupt); err != nil {
			return nil, 0, err
		}
	}
	return items, nHead, nil
}

// dropCorrupt moves undecodable entries to the quarantine.
func (o *Outbox) dropCorrupt(seqs []uint64) error {
	err := o.db.Update(func(tx *bbolt.Tx) error {
		q, err := openBuckets(tx)
		if err != nil {
			return err
		}
		for _, seq := range seqs {
			k := seqKey(seq)
			v := q.outbox.Get(k)
			if v == nil {
				continue
			}
			qp := fmt.Sprintf(`{"at":%q,"reason":"undecodable outbox entry","point":"%x"}`,
				o.now().UTC().Format(time.RFC3339Nano), v)
			qs, err := q.quarantineB.NextSequence()
			if err != nil {
				return err
			}
			if err := q.quarantineB.Put(seqKey(qs), []byte(qp)); err != nil {
				return err
			}
			if err := q.outbox.Delete(k); err != nil {
				return err
			}
			if err := q.raw.Delete(k); err != nil {
				return err
			}
			q.count--
		}
		return q.saveCount()
	})
	if err != nil {
		return fmt.Errorf("outbox quarantine corrupt: %w", err)
	}
	o.metrics.quarantined.Add(float64(len(seqs)))
	o.log.Error("outbox: undecodable entries quarantined", "count", len(seqs))
	return nil
}

// done removes written points and quarantines refused ones (reasons[i] for
// bad[i]) in one transaction.
func (o *Outbox) done(written []item, bad []item, reasons []string) error {
	if len(written) == 0 && len(bad) == 0 {
		return nil
	}
	now := o.now()
	err := o.db.Update(func(tx *bbolt.Tx) error {
		q, err := openBuckets(tx)
		if err != nil {
			return err
		}
		rm := q.sentRemover()
		for _, it := range written {
			if err := rm.remove(it); err != nil {
				return err
			}
		}
		for i, it := range bad {
			if q.outbox.Get(seqKey(it.seq)) == nil {
				continue // superseded by a revision meanwhile
			}
			p, err := it.decode()
			if err != nil {
				return err
			}
			if err := q.quarantine(now, p, reasons[i]); err != nil {
				return err
			}
			if err := q.remove(it.seq, it.skey); err != nil {
				return err
			}
		}
		return q.saveCount()
	})
	if err != nil {
		return fmt.Errorf("outbox remove: %w", err)
	}
	if len(bad) > 0 {
		o.metrics.quarantined.Add(float64(len(bad)))
		for i := range bad {
			o.log.Warn("outbox: point quarantined", "reason", reasons[i], "point", string(bad[i].line))
		}
	}
	return nil
}

// sentRemover deletes points the drain read, with one cursor per bucket
// for a whole removal (a cursor made per point cost allocations per point).
type sentRemover struct {
	q              *buckets
	outbox, series *bbolt.Cursor
}

func (q *buckets) sentRemover() sentRemover {
	return sentRemover{q: q, outbox: q.outbox.Cursor(), series: q.series.Cursor()}
}

// remove deletes a point the drain read, unless a revision replaced it
// meanwhile (then the revision and its series entry stay). It seeks once per
// bucket where a lookup and a delete would seek twice, and only ClassRaw
// points have an entry in the raw bucket to delete.
func (r sentRemover) remove(it item) error {
	var kb [8]byte
	binary.BigEndian.PutUint64(kb[:], it.seq)
	k := kb[:]
	if ck, _ := r.outbox.Seek(k); !bytes.Equal(ck, k) {
		return nil
	}
	if err := r.outbox.Delete(); err != nil {
		return err
	}
	if sk, v := r.series.Seek(it.skey); bytes.Equal(sk, it.skey) && bytes.Equal(v, k) {
		if err := r.series.Delete(); err != nil {
			return err
		}
	}
	if it.raw {
		if err := r.q.raw.Delete(k); err != nil {
			return err
		}
	}
	if r.q.count > 0 {
		r.q.count--
	}
	return nil
}
