package loadgen

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"

	"etpulse/hourly"
)

// TestCloseMoment: record latency runs from the gateway's acknowledgement
// of the reading that closes a station's hour (the hour closes in the
// commit that precedes it) to the record's publication, not from the
// reading's publication, so a queue at the broker is not counted; the hour
// close for all stations runs from the last station's closing reading taken
// to the last record published.
func TestCloseMoment(t *testing.T) {
	f := newFarm(2, "r", 5*time.Minute)
	tr := newTracker(f, 1, 2, 100)
	var now time.Duration
	tr.clock = func() time.Duration { return now }
	end := SimStart.Add(time.Hour)
	a, b := f.stations[0], f.stations[1]
	tr.publishing(0, 13, outMsg{topic: a.topics[0], station: a.idx, closes: end.Unix()})
	tr.publishing(0, 13, outMsg{topic: b.topics[0], station: b.idx, closes: end.Unix()})
	now = 500 * time.Millisecond // queued at the broker
	tr.ack(a.topics[0])
	now += 15 * time.Millisecond
	tr.ack(b.topics[0])
	now += 15 * time.Millisecond
	tr.record(hourly.Record{Station: a.id, End: end})
	now += 15 * time.Millisecond
	tr.record(hourly.Record{Station: b.id, End: end})

	assert.Equal(t, 30*time.Millisecond, tr.recLat.max, "acknowledged at 500 and 515 ms, published at 530 and 545 ms")
	n, p50, worst := tr.hourCloses()
	assert.Equal(t, 1, n)
	assert.Equal(t, 30*time.Millisecond, worst, "last closing reading taken at 515 ms, last record at 545 ms")
	assert.Equal(t, worst, p50)

	// A record published before its closing reading is acknowledged (the
	// acknowledgement follows the commit) counts as no delay.
	end2 := end.Add(time.Hour)
	tr.publishing(0, 25, outMsg{topic: a.topics[0], station: a.idx, closes: end2.Unix()})
	tr.record(hourly.Record{Station: a.id, End: end2})
	tr.ack(a.topics[0])
	assert.Equal(t, int64(3), tr.recLat.n)
}
