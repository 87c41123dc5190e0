package store

import (
	"runtime"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
)

// TestRemovalAllocations: removing a drained batch from the outbox makes
// its cursors once, not once per point: at most 2 allocations per removed
// point remain, bbolt's own for the nodes and pages it touches (1.26
// measured for 2,000 zone points; 6.26 with a cursor and key per point).
func TestRemovalAllocations(t *testing.T) {
	const n = 2000
	db := openTestDB(t)
	o := openTestOutbox(t, db, OutboxOptions{Clock: time.Now})
	pts := make([]Point, n)
	for i := range pts {
		pts[i] = zonePt("z1", i, float64(i%7))
	}
	enqueue(t, db, o, pts...)
	items := mustNext(t, o, n)
	require.Len(t, items, n)

	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	require.NoError(t, o.done(items, nil, nil))
	runtime.ReadMemStats(&after)
	perPoint := float64(after.Mallocs-before.Mallocs) / n
	t.Logf("%.2f allocations per removed point", perPoint)
	if perPoint > 2 {
		t.Errorf("%.2f allocations per removed point, want at most 2 (cursors made once per removal)", perPoint)
	}
	depth, _ := o.Stats()
	require.Zero(t, depth)
}
