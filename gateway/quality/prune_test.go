package quality

import (
	"fmt"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/hourly"
)

// Readings of a quantity left out of the record (net radiation here) are
// kept per station-hour only while a late reading may still revise the
// hour: the station's late window, its max_future and close grace, plus
// two hours of margin (8 h 7 min here), not a fixed 30 hours at every
// station. The hour being closed and the recent ones still see them.
func TestAccumulatedKeptForTheLateWindow(t *testing.T) {
	cfg := testConfig(config.RespondKeep)
	sc := &cfg.Sites[0].Stations[0]
	sc.LateWindow, sc.MaxFuture, sc.CloseGrace = config.Duration(6*time.Hour), config.Duration(5*time.Minute), config.Duration(2*time.Minute)
	f := newFixture(t, cfg, filepath.Join(t.TempDir(), "p.db"), t0)
	m := f.mon
	id := stationID{"brackenfold", "orchard"}
	info := m.stations[id]
	require.NotNil(t, info)
	hours := weather{}.hours(30)
	for _, o := range hours {
		require.NotContains(t, o.Q, hourly.NetRad)
		m.mu.Lock()
		m.accumulate(id, info, hourly.Sample{Sensor: "rn1", Quantity: hourly.NetRad, Time: o.Start.Add(10 * time.Minute), Value: 300})
		m.mu.Unlock()
		f.closeHours(t, []HourObs{o})
	}
	last := len(hours) - 1
	for back, kept := range map[int]bool{0: true, 1: true, 8: true, 9: false, 12: false, 29: false} {
		obs := m.observe(info, record(hours[last-back]))
		if kept {
			assert.Contains(t, obs.Q, hourly.NetRad, "%d hours back", back)
		} else {
			assert.NotContains(t, obs.Q, hourly.NetRad, "%d hours back", back)
		}
	}
}

// BenchmarkPruneAccumulated measures accumulating a reading and closing
// hours as the pipeline does at n stations: every station closes hour after
// hour and prunes what it accumulated.
func BenchmarkPruneAccumulated(b *testing.B) {
	for _, stations := range []int{20, 5000} {
		b.Run(fmt.Sprintf("stations=%d", stations), func(b *testing.B) {
			cfg := testConfig(config.RespondKeep)
			base := cfg.Sites[0].Stations[0]
			cfg.Sites[0].Stations = nil
			for i := range stations {
				st := base
				st.ID = fmt.Sprintf("st%05d", i)
				st.LateWindow = config.Duration(6 * time.Hour)
				cfg.Sites[0].Stations = append(cfg.Sites[0].Stations, st)
			}
			f := newFixture(b, cfg, filepath.Join(b.TempDir(), "p.db"), t0)
			m := f.mon
			ids := make([]stationID, stations)
			for i := range ids {
				ids[i] = stationID{"brackenfold", fmt.Sprintf("st%05d", i)}
			}
			hour := func(n int) time.Time { return t0.Add(time.Duration(n) * time.Hour) }
			for i := 0; b.Loop(); i++ {
				h, st := i/stations, ids[i%stations]
				info := m.stations[st]
				m.mu.Lock()
				m.accumulate(st, info, hourly.Sample{Sensor: "rn1", Quantity: hourly.NetRad, Time: hour(h + 1), Value: 1})
				m.mu.Unlock()
				m.pruneAcc(info, hour(h))
			}
		})
	}
}
