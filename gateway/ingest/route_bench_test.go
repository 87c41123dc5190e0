package ingest

import (
	"fmt"
	"runtime"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
)

// BenchmarkRouteJSON decodes a JSON value payload with its time key.
func BenchmarkRouteJSON(b *testing.B) {
	r := newTestRouter(b)
	p := []byte(`{"rh": 61.5, "ts": "2026-06-01T10:00:00Z"}`)
	b.ReportAllocs()
	for b.Loop() {
		r.Route("bh/west/rh", p, arrival)
	}
}

// BenchmarkRouteManyStations routes a number payload among the sensors of
// n invented stations of six sensors: the topic lookup is a map, so the
// cost does not depend on n.
func BenchmarkRouteManyStations(b *testing.B) {
	for _, n := range []int{20, 1000, 5000} {
		b.Run(fmt.Sprintf("stations=%d", n), func(b *testing.B) {
			cfg := manyStations(b, n)
			r, err := NewRouter(cfg)
			require.NoError(b, err)
			topic := fmt.Sprintf("net/s%05d/t", n-1)
			p := []byte(`21.5`)
			if rds, rjs := r.Route(topic, p, arrival); len(rds) != 1 || len(rjs) != 0 {
				b.Fatalf("route: %v %v", rds, rjs)
			}
			b.ReportAllocs()
			for b.Loop() {
				r.Route(topic, p, arrival)
			}
		})
	}
}

// The readings of one message are built without growing their slice or
// building their sensor names per message (both are per-binding), and a
// plain JSON object is read without building a map of copies of its
// members: a budget of allocations per message of each format, counted,
// not timed.
func TestRouteAllocationBudget(t *testing.T) {
	r := newTestRouter(t)
	for _, c := range []struct {
		topic, payload string
		readings       int
		budget         float64
	}{
		{"bh/east/obs", `{"at": 1780308000000, "temp": 18.25, "dew": 9.5, "wind": 3.1, "sol": 512, "batt": 3.7, "rain_ctr": 17}`, 5, 7},
		{"bh/east/senml", `[{"bn":"east:","bt":1780308000,"n":"temp","u":"Cel","v":18.5},{"n":"vp","u":"kPa","v":1.2},{"n":"rn","u":"W/m2","v":412}]`, 3, 19},
		{"bh/west/rh", `{"rh": 61.5, "ts": "2026-06-01T10:00:00Z"}`, 1, 4},
	} {
		payload := []byte(c.payload)
		rds, rjs := r.Route(c.topic, payload, arrival)
		require.Empty(t, rjs, c.topic)
		require.Len(t, rds, c.readings, c.topic)
		allocs := testing.AllocsPerRun(50, func() { r.Route(c.topic, payload, arrival) })
		assert.LessOrEqual(t, allocs, c.budget, c.topic)
	}
}

// manyStations is the configuration of n invented stations of six number
// sensors each.
func manyStations(t testing.TB, n int) *config.Config {
	var c strings.Builder
	c.WriteString("broker: {url: \"tcp://127.0.0.1:1883\", client_id: ingest-bench}\nsites:\n  - id: net\n    stations:\n")
	for i := 0; i < n; i++ {
		fmt.Fprintf(&c, "      - id: s%05d\n        latitude: 36.6\n        longitude: -120.4\n        elevation_m: 90\n        utc_offset_hours: -8\n        sensors:\n", i)
		for _, q := range []string{"t:air_temp:degC", "rh:rel_humidity:%", "u:wind:m/s", "rs:solar:W/m2", "td:dew_point:degC", "rain:rain:mm"} {
			f := strings.SplitN(q, ":", 3)
			fmt.Fprintf(&c, "          - {id: %s, topic: net/s%05d/%s, format: number, quantity: %s, unit: %q}\n", f[0], i, f[0], f[1], f[2])
		}
	}
	cfg, err := config.Parse([]byte(c.String()))
	require.NoError(t, err)
	return cfg
}

// The router keeps per subscribed topic its map entry and a small binding
// that points to the sensor's configuration, not a copy of it: the bytes
// it holds per topic at 1,000 stations (heap in use after a collection,
// before and after building it).
func TestRouterBytesPerTopic(t *testing.T) {
	cfg := manyStations(t, 1000)
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	r, err := NewRouter(cfg)
	require.NoError(t, err)
	runtime.GC()
	runtime.ReadMemStats(&after)
	perTopic := float64(after.HeapAlloc-before.HeapAlloc) / 6000
	t.Logf("%.0f B per topic", perTopic)
	assert.Less(t, perTopic, 200.0)
	runtime.KeepAlive(r)
	runtime.KeepAlive(cfg)
}
