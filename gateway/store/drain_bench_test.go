package store

import (
	"context"
	"fmt"
	"testing"
	"time"

	influxdb2 "github.com/influxdata/influxdb-client-go/v2"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/internal/testenv"
)

// drainChunk is the number of points each path writes per benchmark
// iteration: ten batches of the default size.
const drainChunk = 10 * DefaultBatchSize

// maxDrainIterations bounds BenchmarkOutboxDrainVsBare in count (each
// iteration is two chunks of points written to the server).
const maxDrainIterations = 40

// BenchmarkOutboxDrainVsBare measures, in one run against the same real
// server, the gateway's outbox path against a bare line-protocol poster:
//
//   - outbox: points are committed to the bbolt outbox as the gateway's
//     producers do (one transaction per hourly record or per zone step, not
//     timed), then a Writer built as Setup builds it (InfluxSink over
//     influxdb-client-go's blocking write API, fsync on) drains them with
//     Flush (timed): read, send, remove after the server accepted them.
//   - bare: the same kind and number of points, rendered to line protocol
//     beforehand (not timed) and posted in batches of the same size through
//     the same client's blocking write API (timed): the POSTs alone, the
//     floor of any poster.
//
// The two alternate within each iteration (the order flips every
// iteration) so both see the same machine load. "hour" points are the
// et_hour points of the hour handler (about 30 fields each); "zone" points
// are zone steps with one field, where the client's own cost weighs most.
// It reports both rates in points/s and outbox/bare. Skipped without a
// store server (ETPULSE_TEST_INFLUX); bounded to maxDrainIterations, e.g.
// -benchtime 6x.
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
	client := influxdb2.NewClientWithOptions(base, "", influxdb2.DefaultOptions().
		SetPrecision(time.Nanosecond).SetHTTPRequestTimeout(uint(DefaultWriteTimeout.Seconds())))
	b.Cleanup(client.Close)
	bare := client.WriteAPIBlocking("lowmead", "farm")
	// Same tag lengths on both sides, so the lines are the same size.
	stamp := time.Now().UnixNano()
	obSite, bpSite := fmt.Sprintf("ob-%d", stamp), fmt.Sprintf("bp-%d", stamp)
	ctx := context.Background()

	var obTime, bareTime time.Duration
	var obPoints, barePoints int
	runOutbox := func(first int) {
		b.StopTimer()
		pts := benchPoints(kind, obSite, first, drainChunk)
		db.NoSync = true // filling is not what is measured
		for _, p := range pts {
			require.NoError(b, db.Update(func(tx *bbolt.Tx) error { return o.Enqueue(tx, p) }))
		}
		db.NoSync = false
		b.StartTimer()
		t := time.Now()
		if err := w.Flush(ctx); err != nil {
			b.Fatal(err)
		}
		obTime += time.Since(t)
		obPoints += len(pts)
		if d, _ := o.Stats(); d != 0 {
			b.Fatalf("%d points left in the outbox after a flush", d)
		}
	}
	runBare := func(first int) {
		b.StopTimer()
		pts := benchPoints(kind, bpSite, first, drainChunk)
		var bodies []string // rendered before the clock starts: the POSTs alone are timed
		for len(pts) > 0 {
			n := min(DefaultBatchSize, len(pts))
			var buf []byte
			for i, p := range pts[:n] {
				if i > 0 {
					buf = append(buf, '\n')
				}
				buf = AppendLine(buf, p)
			}
			bodies = append(bodies, string(buf))
			barePoints += n
			pts = pts[n:]
		}
		b.StartTimer()
		t := time.Now()
		for _, body := range bodies {
			if err := bare.WriteRecord(ctx, body); err != nil {
				b.Fatal(err)
			}
		}
		bareTime += time.Since(t)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := range b.N {
		first := i * drainChunk
		if i%2 == 0 {
			runOutbox(first)
			runBare(first)
		} else {
			runBare(first)
			runOutbox(first)
		}
	}
	b.StopTimer()
	obRate := float64(obPoints) / obTime.Seconds()
	bareRate := float64(barePoints) / bareTime.Seconds()
	b.ReportMetric(obRate, "outbox_points/s")
	b.ReportMetric(bareRate, "bare_points/s")
	b.ReportMetric(obRate/bareRate, "outbox/bare")
}
