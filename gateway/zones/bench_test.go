package zones

import (
	"testing"
	"time"

	"go.etcd.io/bbolt"
)

// BenchmarkHandleHour measures stepping the three zones of one station in
// the hour's transaction, with their step points into the outbox (one
// committed bbolt transaction per hour, fsync included).
func BenchmarkHandleHour(b *testing.B) {
	start := time.Date(2026, 7, 1, 0, 0, 0, 0, fernLoc)
	f := newFixture(b, testConfig(b), nil, start)
	i := 0
	for b.Loop() {
		rec := record(start.Add(time.Duration(i)*time.Hour), 0.3, 0)
		if err := f.db.Update(func(tx *bbolt.Tx) error { return f.svc.HandleHour(tx, rec) }); err != nil {
			b.Fatal(err)
		}
		i++
	}
}
