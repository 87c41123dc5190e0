package store

import (
	"bytes"
	"encoding/binary"
	"fmt"
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

// next reads up to maxHead of the oldest pending points and, when more are
// pending, up to maxLive of the newest ones enqueued at or after liveSince
// (the live share of a batch during a backfill). The result is in sequence
// order: head first, then the live tail. A point that cannot be decoded is
// quarantined on the spot.
func (o *Outbox) next(maxHead, maxLive int, liveSince time.Time) ([]item, error) {
	var items []item
	var corrupt []uint64
	err := o.db.View(func(tx *bbolt.Tx) error {
		c := tx.Bucket(bucketOutbox).Cursor()
		buf := batchBuffer(maxHead + maxLive)
		read := func(k, v []byte) {
			if it, ok := readItem(k, v, &buf); ok {
				items = append(items, it)
			} else {
				corrupt = append(corrupt, it.seq)
			}
		}
		var lastHead []byte
		n := 0
		for k, v := c.First(); k != nil && n < maxHead; k, v = c.Next() {
			read(k, v)
			lastHead = bytes.Clone(k)
			n++
		}
		if maxLive <= 0 {
			return nil
		}
		var tail []item
		headItems := items
		items = nil
		n = 0
		for k, v := c.Last(); k != nil && n < maxLive && (lastHead == nil || bytes.Compare(k, lastHead) > 0); k, v = c.Prev() {
			if len(v) >= 8 && int64(binary.BigEndian.Uint64(v)) < liveSince.UnixNano() {
				break
			}
			read(k, v)
			n++
		}
		tail = items
		for i, j := 0, len(tail)-1; i < j; i, j = i+1, j-1 {
			tail[i], tail[j] = tail[j], tail[i]
		}
		items = append(headItems, tail...)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("outbox next: %w", err)
	}
	if len(corrupt) > 0 {
		if err := o.dropCorrupt(corrupt); err != nil {
			return nil, err
		}
	}
	return items, nil
}

// nextAfter reads up to n pending points with a sequence number above
// after, in sequence order: the pipelined drain reads on while the points it
// sent last are still being removed. Undecodable entries are quarantined.
func (o *Outbox) nextAfter(after uint64, n int) ([]item, error) {
	items := make([]item, 0, n)
	var corrupt []uint64
	err := o.db.View(func(tx *bbolt.Tx) error {
		c := tx.Bucket(bucketOutbox).Cursor()
		buf := batchBuffer(n)
		for k, v := c.Seek(seqKey(after + 1)); k != nil && len(items)+len(corrupt) < n; k, v = c.Next() {
			if it, ok := readItem(k, v, &buf); ok {
				items = append(items, it)
			} else {
				corrupt = append(corrupt, it.seq)
			}
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("outbox next after %d: %w", after, err)
	}
	if len(corrupt) > 0 {
		if err := o.dropCorrupt(corrupt); err != nil {
			return nil, err
		}
	}
	return items, nil
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
		for _, it := range written {
			if err := q.removeSent(it); err != nil {
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

// removeSent deletes a point the drain read, unless a revision replaced it
// meanwhile (then the revision and its series entry stay). It seeks once per
// bucket where a lookup and a delete would seek twice, and only ClassRaw
// points have an entry in the raw bucket to delete.
func (q *buckets) removeSent(it item) error {
	k := seqKey(it.seq)
	c := q.outbox.Cursor()
	if ck, _ := c.Seek(k); !bytes.Equal(ck, k) {
		return nil
	}
	if err := c.Delete(); err != nil {
		return err
	}
	sc := q.series.Cursor()
	if sk, v := sc.Seek(it.skey); bytes.Equal(sk, it.skey) && bytes.Equal(v, k) {
		if err := sc.Delete(); err != nil {
			return err
		}
	}
	if it.raw {
		if err := q.raw.Delete(k); err != nil {
			return err
		}
	}
	if q.count > 0 {
		q.count--
	}
	return nil
}
