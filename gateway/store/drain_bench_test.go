package store

import (
	"context"
	"fmt"
	"testing"
	"time"

	influxdb2 "github.com/influxdata/influxdb-client-go/v2"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/internal/testenv"
)

// drainChunk is the number of points each path writes per benchmark
// iteration: ten batches of the default size.
const drainChunk = 10 * DefaultBatchSize

// maxDrainIterations bounds BenchmarkOutboxDrainVsBare in count (each
// iteration writes four chunks of points to the server).
const maxDrainIterations = 40

// BenchmarkOutboxDrainVsBare measures, in one run against the same real
// server, the gateway's outbox path against a bare line-protocol poster:
//
//   - outbox: points are committed to the bbolt outbox as the gateway's
//     producers do (one transaction per hourly record or per zone step, not
//     timed), then a Writer built as Setup builds it (InfluxSink over
//     influxdb-client-go's blocking write API, fsync on) drains them with
//     Flush (timed): read, send, remove after the server accepted them.
//   - outbox_run: the same, drained by the writer's Run (the steady drain
//     of the live gateway; its backfill rate set out of the way), timed
//     until the last point is removed.
//   - bare: the same kind and number of points, rendered to line protocol
//     beforehand (not timed) and posted in batches of the same size through
//     the same client's blocking write API (timed): the POSTs alone, the
//     floor of any poster.
//   - bare_render: the same, with each batch rendered from its Points
//     (AppendLine) inside the timed loop: a bare poster that is given
//     points, as the outbox is.
//
// The four alternate within each iteration (the order rotates every
// iteration) so all see the same machine load. "hour" points are the
// et_hour points of the hour handler (about 30 fields each); "zone" points
// are zone steps with one field, where the client's own cost weighs most.
// It reports the four rates in points/s, outbox/bare, outbox/bare_render,
// outbox_run/bare and outbox_run/bare_render. Skipped without a store server (ETPULSE_TEST_INFLUX);
// bounded to maxDrainIterations, e.g. -benchtime 10x.
func BenchmarkOutboxDrainVsBare(b *testing.B) {
	base := testenv.Influx(b)
	for _, kind := range []string{"hour", "zone"} {
		b.Run(kind, func(b *testing.B) { benchDrainVsBare(b, base, kind) })
	}
}

// benchPoints returns n points of kind ("hour" or "zone") of site, numbered
// from first (distinct series key per number), all within the last weeks.
func benchPoints(kind, site string, first, n int) []Point {
	pts := make([]Point, 0, n)
	for i := first; i < first+n; i++ {
		switch kind {
		case "hour":
			rec := example19Record()
			rec.Site, rec.Station = site, fmt.Sprintf("mast-%03d", i%200)
			rec.Start = realNow.Add(-time.Duration(i/200+1) * time.Hour)
			rec.End = rec.Start.Add(time.Hour)
			pts = append(pts, HourPoints(rec)...)
		default:
			at := realNow.Add(-24 * time.Hour).Add(time.Duration(i) * time.Millisecond)
			pts = append(pts, ZonePoint(site, fmt.Sprintf("block-%02d", i%20), at, map[string]any{"depletion_mm": float64(i % 97)}))
		}
	}
	return pts
}

func benchDrainVsBare(b *testing.B, base, kind string) {
	if b.N > maxDrainIterations {
		b.Skipf("at most %d iterations (each writes %d points per path); use -benchtime %dx or less", maxDrainIterations, drainChunk, maxDrainIterations)
	}
	db := openTestDB(b)
	o := openTestOutbox(b, db, OutboxOptions{Cap: 1 << 30, Clock: time.Now})
	w, err := NewWriter(o, WriterOptions{URL: base, Org: "lowmead", Bucket: "farm"})
	require.NoError(b, err)
	b.Cleanup(w.Close)
	// Run's backfill rate (1,000 points/s by default) would pace it far
	// below either poster: set out of the way to measure the drain itself.
	wr, err := NewWriter(o, WriterOptions{URL: base, Org: "lowmead", Bucket: "farm", BackfillRate: 1e12})
	require.NoError(b, err)
	b.Cleanup(wr.Close)
	client := influxdb2.NewClientWithOptions(base, "", influxdb2.DefaultOptions().
		SetPrecision(time.Nanosecond).SetHTTPRequestTimeout(uint(DefaultWriteTimeout.Seconds())))
	b.Cleanup(client.Close)
	bare := client.WriteAPIBlocking("lowmead", "farm")
	// Same tag lengths for every path, so the lines are the same size.
	stamp := time.Now().UnixNano()
	obSite, orSite := fmt.Sprintf("ob-%d", stamp), fmt.Sprintf("or-%d", stamp)
	bpSite, brSite := fmt.Sprintf("bp-%d", stamp), fmt.Sprintf("br-%d", stamp)
	ctx := context.Background()

	var obTime, runTime, bareTime, renderTime time.Duration
	var obPoints, runPoints, barePoints, renderPoints int
	fill := func(site string, first int) {
		pts := benchPoints(kind, site, first, drainChunk)
		db.NoSync = true // filling is not what is measured
		for _, p := range pts {
			require.NoError(b, db.Update(func(tx *bbolt.Tx) error { return o.Enqueue(tx, p) }))
		}
		db.NoSync = false
		require.NoError(b, db.Sync()) // the fill's writes reach the disk before the clock starts
	}
	runOutbox := func(first int) {
		b.StopTimer()
		fill(obSite, first)
		b.StartTimer()
		t := time.Now()
		if err := w.Flush(ctx); err != nil {
			b.Fatal(err)
		}
		obTime += time.Since(t)
		obPoints += drainChunk
		if d, _ := o.Stats(); d != 0 {
			b.Fatalf("%d points left in the outbox after a flush", d)
		}
	}
	runRun := func(first int) {
		b.StopTimer()
		fill(orSite, first)
		runCtx, cancel := context.WithCancel(ctx)
		done := make(chan error, 1)
		want := testutil.ToFloat64(wr.metrics.written) + drainChunk
		b.StartTimer()
		t := time.Now()
		go func() { done <- wr.Run(runCtx) }()
		for testutil.ToFloat64(wr.metrics.written) < want {
			time.Sleep(100 * time.Microsecond)
		}
		runTime += time.Since(t)
		b.StopTimer()
		cancel()
		require.NoError(b, <-done)
		runPoints += drainChunk
		if d, _ := o.Stats(); d != 0 {
			b.Fatalf("%d points left in the outbox after Run", d)
		}
		b.StartTimer()
	}
	// post renders each batch of pts and posts it; with rendered set, the
	// bodies are rendered before the clock starts and only the POSTs are
	// timed.
	post := func(pts []Point, rendered bool) time.Duration {
		b.StopTimer()
		var bodies []string
		var batches [][]Point
		for len(pts) > 0 {
			n := min(DefaultBatchSize, len(pts))
			batches, pts = append(batches, pts[:n]), pts[n:]
		}
		body := func(batch []Point) string {
			var buf []byte
			for i, p := range batch {
				if i > 0 {
					buf = append(buf, '\n')
				}
				buf = AppendLine(buf, p)
			}
			return string(buf)
		}
		if rendered {
			for _, batch := range batches {
				bodies = append(bodies, body(batch))
			}
		}
		b.StartTimer()
		t := time.Now()
		for i, batch := range batches {
			var s string
			if rendered {
				s = bodies[i]
			} else {
				s = body(batch)
			}
			if err := bare.WriteRecord(ctx, s); err != nil {
				b.Fatal(err)
			}
		}
		return time.Since(t)
	}
	runBare := func(first int) {
		b.StopTimer() // making the points is not measured
		bareTime += post(benchPoints(kind, bpSite, first, drainChunk), true)
		barePoints += drainChunk
	}
	runRender := func(first int) {
		b.StopTimer()
		renderTime += post(benchPoints(kind, brSite, first, drainChunk), false)
		renderPoints += drainChunk
	}
	paths := []func(int){runOutbox, runRun, runBare, runRender}
	b.ReportAllocs()
	b.ResetTimer()
	for i := range b.N {
		for j := range paths { // the order rotates every iteration
			paths[(i+j)%len(paths)](i * drainChunk)
		}
	}
	b.StopTimer()
	obRate := float64(obPoints) / obTime.Seconds()
	runRate := float64(runPoints) / runTime.Seconds()
	bareRate := float64(barePoints) / bareTime.Seconds()
	renderRate := float64(renderPoints) / renderTime.Seconds()
	b.ReportMetric(obRate, "outbox_points/s")
	b.ReportMetric(runRate, "outbox_run_points/s")
	b.ReportMetric(bareRate, "bare_points/s")
	b.ReportMetric(renderRate, "bare_render_points/s")
	b.ReportMetric(obRate/bareRate, "outbox/bare")
	b.ReportMetric(obRate/renderRate, "outbox/bare_render")
	b.ReportMetric(runRate/bareRate, "outbox_run/bare")
	b.ReportMetric(runRate/renderRate, "outbox_run/bare_render")
}

// BenchmarkRenderLine measures rendering one et_hour point (about 30
// fields) to line protocol: from its stored encoding, as the drain does,
// and from the Point (AppendLine), as a poster given points does.
func BenchmarkRenderLine(b *testing.B) {
	p := HourPoints(example19Record())[0]
	enc := appendPoint(nil, normalize(p))
	b.Run("encoded", func(b *testing.B) {
		b.ReportAllocs()
		var buf []byte
		for range b.N {
			var err error
			if buf, _, err = appendLineEncoded(buf[:0], enc); err != nil {
				b.Fatal(err)
			}
		}
		b.ReportMetric(float64(len(buf)), "bytes/line")
	})
	b.Run("point", func(b *testing.B) {
		b.ReportAllocs()
		var buf []byte
		for range b.N {
			buf = AppendLine(buf[:0], p)
		}
	})
}
