package store

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"
)

// The quarantine is kept for the history retention and to a bound: a
// server that refuses points for months cannot fill the disk. Older points
// go first; the ones left are read back in order.
func TestQuarantinePrunedByAgeAndCount(t *testing.T) {
	start := time.Date(2025, 3, 4, 6, 0, 0, 0, time.UTC)
	db := openTestDB(t)
	o := openTestOutbox(t, db, OutboxOptions{LocalOnly: true})
	h := o.History()
	h.retention = 48 * time.Hour
	p := ZonePoint("wirra-flat", "almond-2", start, map[string]any{"depletion_mm": 4.2})
	for i := range 10 { // one refused point an hour from start
		require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
			q, err := openBuckets(tx)
			if err != nil {
				return err
			}
			return q.quarantine(start.Add(time.Duration(i)*time.Hour), p, "field type conflict")
		}))
	}
	quarantined := func() []time.Time {
		var out []time.Time
		require.NoError(t, o.Quarantine(func(qp QuarantinedPoint) error { out = append(out, qp.At); return nil }))
		return out
	}

	// 50 h after the start, the first 3 (hours 0-2) are older than 48 h.
	n, err := h.pruneQuarantine(start.Add(50*time.Hour+time.Minute), 100)
	require.NoError(t, err)
	assert.Equal(t, 3, n)
	got := quarantined()
	require.Len(t, got, 7)
	assert.Equal(t, start.Add(3*time.Hour), got[0])

	// A bound of 4 keeps the 4 youngest, whatever their age.
	n, err = h.pruneQuarantine(start.Add(10*time.Hour), 4)
	require.NoError(t, err)
	assert.Equal(t, 3, n)
	got = quarantined()
	require.Len(t, got, 4)
	assert.Equal(t, start.Add(6*time.Hour), got[0])
	assert.Equal(t, start.Add(9*time.Hour), got[3])
}
