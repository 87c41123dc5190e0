package pipeline

import (
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/ingest"
)

// manyStationsConfig is an invented farm network of n stations of four
// sensors each, like the test config's "bench".
func manyStationsConfig(tb testing.TB, n int) *config.Config {
	tb.Helper()
	var b strings.Builder
	b.WriteString("broker: {url: \"tcp://127.0.0.1:1883\", client_id: pipeline-bench}\nsites:\n  - id: net\n    stations:\n")
	for i := 0; i < n; i++ {
		fmt.Fprintf(&b, `      - id: s%05d
        latitude: 36.6
        longitude: -120.4
        elevation_m: 90
        utc_offset_hours: -8
        reference: short
        close_grace: 2m
        late_window: 6h
        silence_close: 15m
        sensors:
          - {id: t, topic: net/s%05d/t, format: number, quantity: air_temp, unit: degC}
          - {id: rh, topic: net/s%05d/rh, format: number, quantity: rel_humidity, unit: "%%"}
          - {id: u, topic: net/s%05d/u, format: number, quantity: wind, unit: m/s}
          - {id: rs, topic: net/s%05d/rs, format: number, quantity: solar, unit: W/m2}
`, i, i, i, i, i)
	}
	cfg, err := config.Parse([]byte(b.String()))
	require.NoError(tb, err)
	return cfg
}

// networkReadings is one reading of each sensor of every station at each
// step in [from, to).
func networkReadings(cfg *config.Config, from, to time.Time, step time.Duration) []ingest.Reading {
	var out []ingest.Reading
	for at := from; at.Before(to); at = at.Add(step) {
		samples := weatherSamples(at)
		for _, st := range cfg.Sites[0].Stations {
			for _, s := range samples {
				out = append(out, ingest.Reading{Site: "net", Station: st.ID, Sample: s})
			}
		}
	}
	return out
}

func networkPipeline(b *testing.B, n int) (*Pipeline, *config.Config) {
	cfg := manyStationsConfig(b, n)
	p, err := New(cfg, Options{DB: openDB(b, filepath.Join(b.TempDir(), "s.db"))})
	require.NoError(b, err)
	return p, cfg
}

// BenchmarkTickNothingDue is the clock pass the gateway runs after every
// batch of messages, when no station has anything due: its cost must not
// grow with the number of stations.
func BenchmarkTickNothingDue(b *testing.B) {
	for _, n := range []int{1, 1000, 5000} {
		b.Run(fmt.Sprintf("stations=%d", n), func(b *testing.B) {
			p, cfg := networkPipeline(b, n)
			_, err := p.Ingest(h10.Add(20*time.Minute), networkReadings(cfg, h10, h10.Add(20*time.Minute), 10*time.Minute))
			require.NoError(b, err)
			_, err = p.Tick(h10.Add(20 * time.Minute)) // the first pass after start visits everyone
			require.NoError(b, err)
			now := h10.Add(21 * time.Minute)
			b.ReportAllocs()
			for b.Loop() {
				if _, err := p.Tick(now); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkCloseAllStations closes one hour (ten-minute readings) of every
// station by silence in one clock pass: the "close one hour, all stations"
// figure. Setup (storing the hour) is not timed.
func BenchmarkCloseAllStations(b *testing.B) {
	for _, n := range []int{1, 1000, 5000} {
		b.Run(fmt.Sprintf("stations=%d", n), func(b *testing.B) {
			p, cfg := networkPipeline(b, n)
			at := h10
			b.ReportAllocs()
			for i := 0; b.Loop(); i++ {
				b.StopTimer()
				_, err := p.Ingest(at.Add(time.Hour), networkReadings(cfg, at, at.Add(time.Hour), 10*time.Minute))
				require.NoError(b, err)
				b.StartTimer()
				recs, err := p.Tick(at.Add(time.Hour + 20*time.Minute))
				if err != nil || len(recs) != n {
					b.Fatalf("tick %d: %v, %d records for %d stations", i, err, len(recs), n)
				}
				at = at.Add(2 * time.Hour)
			}
		})
	}
}
