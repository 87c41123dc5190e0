package store

import (
	"encoding/json"
	"fmt"
	"time"

	"go.etcd.io/bbolt"
)

// maxQuarantined bounds the quarantine (points the store refused or that
// failed validation, kept for an operator to read with `etpulse export`):
// a server that refuses every point for months (a schema conflict, a
// bucket retention shorter than a backfill) would otherwise fill the
// state file's disk. At about 1 KB per hour point it is 100 MB at most.
const maxQuarantined = 100_000

// PruneQuarantine deletes quarantined points older than the history
// retention at now, and the oldest beyond maxQuarantined, in bounded
// transactions, and returns how many it deleted.
func (h *History) PruneQuarantine(now time.Time) (int, error) {
	return h.pruneQuarantine(now, maxQuarantined)
}

func (h *History) pruneQuarantine(now time.Time, limit int) (int, error) {
	cutoff := now.Add(-h.retention)
	total := 0
	for {
		n, more := 0, false
		err := h.db.Update(func(tx *bbolt.Tx) error {
			b := tx.Bucket(bucketQuarantine)
			if b == nil {
				return nil
			}
			excess := b.Stats().KeyN - limit
			c := b.Cursor()
			for k, v := c.First(); k != nil && n < 5000; k, v = c.First() {
				if excess <= 0 {
					var qp QuarantinedPoint
					if err := json.Unmarshal(v, &qp); err == nil && !qp.At.Before(cutoff) {
						return nil // oldest first: the rest are younger
					}
				}
				if err := c.Delete(); err != nil {
					return err
				}
				n++
				excess--
			}
			more = n == 5000
			return nil
		})
		total += n
		if err != nil {
			return total, fmt.Errorf("quarantine prune: %w", err)
		}
		if !more {
			return total, nil
		}
	}
}
