package quality

import (
	"fmt"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"

	"etpulse/gateway/config"
	"etpulse/hourly"
)

// Closing the same hour at every station scans the readings accumulated
// for all stations once, not once per station: the cost of an hour close
// does not grow with the number of stations. An earlier cutoff (a revision
// of an older hour) finds nothing left to remove and scans nothing.
func TestPruneAccumulatedOncePerCutoff(t *testing.T) {
	f := newFixture(t, testConfig(config.RespondKeep), filepath.Join(t.TempDir(), "p.db"), t0)
	m := f.mon
	const stations = 200
	for i := range stations {
		id := stationID{"brackenfold", fmt.Sprintf("st%03d", i)}
		for h := range 3 {
			m.acc[accKey{id, t0.Add(time.Duration(h) * time.Hour)}] = map[hourly.Quantity]*QStats{hourly.AirTemp: {N: 1}}
		}
	}
	cut := t0.Add(time.Hour)
	for range stations {
		m.pruneAcc(cut)
	}
	assert.Equal(t, 1, m.accScans, "one scan for one cutoff")
	assert.Len(t, m.acc, 2*stations, "the hour before the cutoff is gone at every station")

	m.pruneAcc(t0) // a revision of an older hour
	assert.Equal(t, 1, m.accScans)
	m.pruneAcc(t0.Add(2 * time.Hour))
	assert.Equal(t, 2, m.accScans)
	assert.Len(t, m.acc, stations)
}

// BenchmarkPruneAccumulated measures the prune of accumulated readings as
// the pipeline calls it: every station closes hour after hour, each hour's
// closes asking for the same cutoff, with 30 hours kept per station.
func BenchmarkPruneAccumulated(b *testing.B) {
	for _, stations := range []int{20, 5000} {
		b.Run(fmt.Sprintf("stations=%d", stations), func(b *testing.B) {
			f := newFixture(b, testConfig(config.RespondKeep), filepath.Join(b.TempDir(), "p.db"), t0)
			m := f.mon
			ids := make([]stationID, stations)
			for i := range ids {
				ids[i] = stationID{"brackenfold", fmt.Sprintf("st%05d", i)}
			}
			hour := func(n int) time.Time { return t0.Add(time.Duration(n) * time.Hour) }
			for h := range 30 {
				for _, id := range ids {
					m.acc[accKey{id, hour(h)}] = map[hourly.Quantity]*QStats{hourly.AirTemp: {N: 1}}
				}
			}
			for i := 0; b.Loop(); i++ {
				h := 30 + i/stations
				if i%stations == 0 { // the hour's readings arrive
					for _, id := range ids {
						m.acc[accKey{id, hour(h)}] = map[hourly.Quantity]*QStats{hourly.AirTemp: {N: 1}}
					}
				}
				m.pruneAcc(hour(h - 29))
			}
		})
	}
}
