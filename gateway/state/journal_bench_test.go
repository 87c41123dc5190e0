package state

import (
	"fmt"
	"path/filepath"
	"testing"
	"time"
)

// BenchmarkJournalAppend appends windows of 16 messages of a station's
// JSON reading (one write and one fdatasync per window, as intake does)
// and resets the journal every 512 windows, as a checkpoint would. Per
// op: one window. Reports bytes appended per message.
func BenchmarkJournalAppend(b *testing.B) {
	j, _, err := OpenJournal(filepath.Join(b.TempDir(), "s.db.journal"))
	if err != nil {
		b.Fatal(err)
	}
	defer j.Close()
	at := time.Date(2026, 7, 9, 10, 0, 0, 0, time.UTC)
	window := make([]JournalEntry, 16)
	for i := range window {
		window[i] = JournalEntry{Received: at, Topic: fmt.Sprintf("corrigan/st%04d/obs", i),
			Payload: []byte(`{"time":"2026-07-09T10:00:00Z","temp_f":71.3,"rh":48.2,"wind_mph":4.1,"solar":612}`)}
	}
	var appended int64
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; b.Loop(); i++ {
		before := j.Size()
		if err := j.Append(window); err != nil {
			b.Fatal(err)
		}
		appended += j.Size() - before
		if i%512 == 511 {
			if err := j.Reset(); err != nil {
				b.Fatal(err)
			}
		}
	}
	b.ReportMetric(float64(appended)/float64(b.N*len(window)), "B/msg")
}
