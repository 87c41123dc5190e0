package store

import (
	"context"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/internal/testenv"
)

// BenchmarkOutboxEnqueue measures the cost of committing one hourly record
// (one et_hour point, also kept in the history) to the outbox. "fsync" is
// one transaction per record as in the gateway; "nosync" shows the CPU and
// allocation cost without the disk flush. bytes/record is the leaf space in
// use in the outbox and history buckets per record.
func BenchmarkOutboxEnqueue(b *testing.B) {
	for _, mode := range []string{"fsync", "nosync"} {
		b.Run(mode, func(b *testing.B) {
			db := openTestDB(b)
			db.NoSync = mode == "nosync"
			o := openTestOutbox(b, db, OutboxOptions{Cap: 1 << 30})
			rec := example19Record()
			b.ReportAllocs()
			b.ResetTimer()
			for i := range b.N {
				rec.Start = t0.Add(time.Duration(i) * time.Hour)
				if err := db.Update(func(tx *bbolt.Tx) error { return o.HandleHour(tx, rec) }); err != nil {
					b.Fatal(err)
				}
			}
			b.StopTimer()
			var inUse int
			require.NoError(b, db.View(func(tx *bbolt.Tx) error {
				for _, name := range [][]byte{bucketOutbox, bucketSeries, bucketHistory} {
					st := tx.Bucket(name).Stats()
					inUse += st.LeafInuse + st.BranchInuse
				}
				return nil
			}))
			b.ReportMetric(float64(inUse)/float64(b.N), "bytes/record")
		})
	}
}

// BenchmarkWriteBatch measures the drain to the real server: batches of
// DefaultBatchSize zone points written through the client and removed from
// the outbox. Skipped when no server is available.
func BenchmarkWriteBatch(b *testing.B) {
	base := testenv.Influx(b)
	db := openTestDB(b)
	db.NoSync = true // measure the store, not this machine's disk
	o := openTestOutbox(b, db, OutboxOptions{Cap: 1 << 30, Clock: time.Now})
	w, err := NewWriter(o, WriterOptions{URL: base, Org: "lowmead", Bucket: "farm"})
	require.NoError(b, err)
	site := uniqueSite("bench")
	pts := make([]Point, DefaultBatchSize)
	start := realNow.Add(-24 * time.Hour)
	seq := 0
	var elapsed time.Duration
	b.ResetTimer()
	for range b.N {
		b.StopTimer()
		for j := range pts {
			pts[j] = ZonePoint(site, "field-7", start.Add(time.Duration(seq)*time.Millisecond), map[string]any{"depletion_mm": float64(seq % 97)})
			seq++
		}
		enqueue(b, db, o, pts...)
		b.StartTimer()
		t := time.Now()
		if err := w.Flush(context.Background()); err != nil {
			b.Fatal(err)
		}
		elapsed += time.Since(t)
		if d, _ := o.Stats(); d != 0 {
			b.Fatalf("%d points left after a flush", d)
		}
	}
	b.StopTimer()
	b.ReportMetric(float64(b.N*len(pts))/elapsed.Seconds(), "points/s")
}
