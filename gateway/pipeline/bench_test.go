package pipeline

import (
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
)

// BenchmarkIngest stores readings durably in batches of 256 (one fsync per
// batch, as the gateway's intake does) and closes the hours they pass.
// readings/s is the figure to watch.
func BenchmarkIngest(b *testing.B) {
	db := openDB(b, filepath.Join(b.TempDir(), "s.db"))
	p, _ := newTestPipeline(b, db, Options{})
	const batch = 256
	at := h10
	b.ReportAllocs()
	b.ResetTimer()
	n := 0
	for b.Loop() {
		rds := benchReadings(at, at.Add(batch/4*time.Minute), time.Minute)
		at = at.Add(batch / 4 * time.Minute)
		if _, err := p.Ingest(at, rds); err != nil {
			b.Fatal(err)
		}
		n += len(rds)
	}
	b.ReportMetric(float64(n)/b.Elapsed().Seconds(), "readings/s")
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(n), "ns/reading")
}

// BenchmarkCloseHour closes one hour of one-minute readings: load, aggregate,
// compute, record, commit.
func BenchmarkCloseHour(b *testing.B) {
	db := openDB(b, filepath.Join(b.TempDir(), "s.db"))
	p, _ := newTestPipeline(b, db, Options{})
	at := h10
	b.ReportAllocs()
	for b.Loop() {
		b.StopTimer()
		rds := benchReadings(at, at.Add(time.Hour), time.Minute)
		_, err := p.Ingest(at.Add(time.Hour), rds)
		require.NoError(b, err)
		st := p.lookup("larkspur", "bench")
		b.StartTimer()
		recs, err := p.closeDue(st, at.Add(2*time.Hour), time.Time{})
		if err != nil || len(recs) != 1 || recs[0].Result == nil {
			b.Fatalf("close: %v, %d records", err, len(recs))
		}
		at = at.Add(time.Hour)
	}
}
