package gateway_test

import (
	"context"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/ingest"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// networkGateway is a stepped gateway for an invented network of n
// stations on the embedded broker.
type networkGateway struct {
	*gateway.Gateway
	n  int
	at time.Time // start of the next hour to fill
}

func newNetworkGateway(tb testing.TB, n int) *networkGateway {
	tb.Helper()
	srv, url, err := demo.StartBroker(true)
	require.NoError(tb, err)
	tb.Cleanup(func() { _ = srv.Close() })
	var y strings.Builder
	fmt.Fprintf(&y, "broker: {url: %q, client_id: network-gw}\nstate: {path: %q}\nsites:\n  - id: net\n    stations:\n", url, filepath.Join(tb.TempDir(), "s.db"))
	for i := 0; i < n; i++ {
		fmt.Fprintf(&y, "      - {id: s%05d, latitude: 36.6, longitude: -120.4, elevation_m: 90, utc_offset_hours: 0, silence_close: 15m, sensors: [", i)
		for _, q := range []string{"t:air_temp:degC", "rh:rel_humidity:%", "u:wind:m/s", "rs:solar:W/m2"} {
			f := strings.SplitN(q, ":", 3)
			fmt.Fprintf(&y, "{id: %s, topic: net/s%05d/%s, format: number, quantity: %s, unit: %q}, ", f[0], i, f[0], f[1], f[2])
		}
		y.WriteString("]}\n")
	}
	cfg, err := config.Parse([]byte(y.String()))
	require.NoError(tb, err)
	db, err := state.Open(cfg.State.Path)
	require.NoError(tb, err)
	tb.Cleanup(func() { _ = db.Close() })
	ctx, cancel := context.WithCancel(context.Background())
	client, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: "network-gw", CleanSession: true})
	require.NoError(tb, err)
	tb.Cleanup(func() { client.Close(time.Second) })
	start := time.Date(2026, 7, 14, 0, 0, 0, 0, time.UTC)
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: client, Clock: clock.NewManual(start)})
	require.NoError(tb, err)
	done := make(chan error, 1)
	go func() { done <- g.RunStepped(ctx) }()
	<-g.Ready()
	tb.Cleanup(func() { cancel(); <-done })
	return &networkGateway{Gateway: g, n: n, at: start}
}

// closeHour stores one air temperature reading per station in the next
// hour and closes it by silence, without publishing: it returns the clock
// after the close and how many records are now pending.
func (ng *networkGateway) closeHour(tb testing.TB) (time.Time, int) {
	tb.Helper()
	var rds []ingest.Reading
	for i := 0; i < ng.n; i++ {
		rds = append(rds, ingest.Reading{Site: "net", Station: fmt.Sprintf("s%05d", i),
			Sample: hourly.Sample{Sensor: "t", Quantity: hourly.AirTemp, Value: 20, Time: ng.at.Add(10 * time.Minute)}})
	}
	res, err := ng.Pipeline().Ingest(ng.at.Add(10*time.Minute), rds)
	require.NoError(tb, err)
	ng.at = ng.at.Add(2 * time.Hour)
	recs, err := ng.Pipeline().Tick(ng.at)
	require.NoError(tb, err)
	return ng.at, len(res.Records) + len(recs)
}

// More stations than the publish window (64) have records pending at once:
// one Step publishes them all (before, the publisher held its lock while
// waiting for a place in the window, and the publishes that would free one
// waited for that lock: nothing moved until the Step's context ended).
func TestRecordsOfManyStationsPublished(t *testing.T) {
	ng := newNetworkGateway(t, 100)
	now, pending := ng.closeHour(t)
	require.Equal(t, 100, pending)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	require.NoError(t, ng.Step(ctx, now))
	assert.Equal(t, uint64(100), ng.Published(), "records published by the time Step returns")
}

// BenchmarkPublishRecords publishes the hour records of n stations (one
// each, closed beforehand) through the embedded broker, QoS 1, and waits
// until every one is acknowledged and marked published: the record publish
// path of a Step. ns/record is the figure to watch.
func BenchmarkPublishRecords(b *testing.B) {
	for _, n := range []int{1, 100, 1000} {
		b.Run(fmt.Sprintf("stations=%d", n), func(b *testing.B) {
			ng := newNetworkGateway(b, n)
			published := ng.Published()
			ctx := context.Background()
			b.ReportAllocs()
			for b.Loop() {
				b.StopTimer()
				now, pending := ng.closeHour(b)
				published += uint64(pending)
				b.StartTimer()
				require.NoError(b, ng.Step(ctx, now))
				if ng.Published() != published {
					b.Fatalf("published %d, want %d", ng.Published(), published)
				}
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*n), "ns/record")
		})
	}
}
