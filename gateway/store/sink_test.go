package store

import (
	"context"
	"fmt"
	"maps"
	"net/http"
	"net/http/httptest"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/state"
)

// sinkFixture is one implementation of Sink under the contract, with the
// means to read back what it holds and to cut it off and restore it.
type sinkFixture struct {
	sink Sink
	// read returns, per numeric field of p, the values the store exposes
	// for p's series at p's time, waiting until every field shows at least
	// want values (want 0: read once, no waiting).
	read func(t *testing.T, p Point, want int) map[string][]float64
	// keepsRevisions: the store keeps an earlier emission as a second sample
	// beside its revision (victoria-metrics) instead of overwriting it.
	keepsRevisions bool
	// refused returns a point like p that this sink refuses, and a text the
	// refusal's reason contains.
	refused func(p Point) (Point, string)
	// down cuts the sink off (an outage); up restores it.
	down, up func(t *testing.T)
}

// testSink is the contract every Sink passes, through the outbox drain: a
// batch is written, a revision overwrites (or, where the store keeps both,
// is stored beside) the earlier emission, an outage keeps the points in the
// outbox until the sink is back, and a refused point goes to the quarantine
// while the rest flows.
func testSink(t *testing.T, newFixture func(t *testing.T, site string) sinkFixture) {
	h0 := realNow.Add(-30 * time.Hour)
	setup := func(t *testing.T) (sinkFixture, *Outbox, *Writer, string) {
		site := uniqueSite("kestrel-ridge")
		fx := newFixture(t, site)
		db := openTestDB(t)
		o := openTestOutbox(t, db, OutboxOptions{Clock: time.Now, Registerer: prometheus.NewRegistry()})
		w, err := NewWriter(o, WriterOptions{Sink: fx.sink, Registerer: prometheus.NewRegistry(),
			MinBackoff: 20 * time.Millisecond, MaxBackoff: 200 * time.Millisecond, FlushInterval: 10 * time.Millisecond})
		require.NoError(t, err)
		return fx, o, w, site
	}
	flush := func(t *testing.T, w *Writer) {
		t.Helper()
		require.NoError(t, w.Flush(context.Background()))
	}
	// expectOnce checks that every numeric field of each point is stored
	// once, with its value.
	expectOnce := func(t *testing.T, fx sinkFixture, pts ...Point) {
		t.Helper()
		for _, p := range pts {
			got := fx.read(t, p, 1)
			for f, want := range numericFields(p) {
				if assert.Len(t, got[f], 1, "%s %v %s at %s", p.Measurement, p.Tags, f, p.Time) {
					assert.InDelta(t, want, got[f][0], 1e-12, "%s %v %s at %s", p.Measurement, p.Tags, f, p.Time)
				}
			}
		}
	}

	t.Run("write", func(t *testing.T) {
		fx, o, w, site := setup(t)
		pts := farmHour(site, h0, 0)
		pts = append(pts, CommandPoint(site, "pear-3", h0, map[string]any{"minutes": int64(37), "depth_mm": 12.0}))
		enqueue(t, w.o.db, o, pts...)
		flush(t, w)
		depth, _ := o.Stats()
		assert.Zero(t, depth, "every point accepted left the outbox")
		assert.Equal(t, float64(len(pts)), testutil.ToFloat64(w.metrics.written))
		expectOnce(t, fx, pts...)
	})

	t.Run("revision", func(t *testing.T) {
		fx, o, w, site := setup(t)
		first := ZonePoint(site, "pear-3", h0, map[string]any{"depletion_mm": 23.5})
		revised := ZonePoint(site, "pear-3", h0, map[string]any{"depletion_mm": 24.75})
		enqueue(t, w.o.db, o, first)
		flush(t, w)
		enqueue(t, w.o.db, o, revised)
		flush(t, w)
		if fx.keepsRevisions {
			// The store holds both emissions at the same time; both are
			// there, the revision last written.
			got := fx.read(t, revised, 2)["depletion_mm"]
			assert.ElementsMatch(t, []float64{23.5, 24.75}, got, "earlier emission and revision side by side")
		} else {
			got := fx.read(t, revised, 1)["depletion_mm"]
			assert.Equal(t, []float64{24.75}, got, "the revision overwrote the earlier emission")
		}

		// A revision made while the earlier emission is still pending
		// replaces it in the outbox: the sink only ever sees the revision.
		pendingFirst := ZonePoint(site, "pear-3", h0.Add(time.Hour), map[string]any{"depletion_mm": 25.0})
		pendingRev := ZonePoint(site, "pear-3", h0.Add(time.Hour), map[string]any{"depletion_mm": 25.5})
		enqueue(t, w.o.db, o, pendingFirst)
		enqueue(t, w.o.db, o, pendingRev)
		flush(t, w)
		expectOnce(t, fx, pendingRev)
	})

	t.Run("outage and resume", func(t *testing.T) {
		fx, o, w, site := setup(t)
		pts := farmHour(site, h0.Add(2*time.Hour), 0)
		fx.down(t)
		enqueue(t, w.o.db, o, pts...)
		flush(t, w) // a sink that is down is no failure of the flush
		depth, _ := o.Stats()
		assert.Equal(t, len(pts), depth, "nothing leaves the outbox during the outage")
		assert.Positive(t, testutil.ToFloat64(w.metrics.errors))
		assert.Zero(t, testutil.ToFloat64(w.metrics.written))
		assert.Zero(t, testutil.ToFloat64(o.metrics.quarantined), "an outage is not a refusal")

		fx.up(t)
		stop := runWriter(t, w)
		waitFor(t, "outbox drained after the outage", func() bool { d, _ := o.Stats(); return d == 0 })
		stop()
		assert.Equal(t, float64(len(pts)), testutil.ToFloat64(w.metrics.written))
		expectOnce(t, fx, pts...)
	})

	t.Run("refusal goes to the quarantine", func(t *testing.T) {
		fx, o, w, site := setup(t)
		good := func(h int) Point {
			return ZonePoint(site, "field-7", h0.Add(time.Duration(h)*time.Hour), map[string]any{"depletion_mm": float64(h) + 0.5})
		}
		bad, reason := fx.refused(AlertPoint(site, "mast", "rh-1", "stuck", h0, map[string]any{"active": true, "value": 100.0}))
		pts := []Point{good(0), good(1), good(2), bad, good(3), good(4)}
		enqueue(t, w.o.db, o, pts...)
		flush(t, w)
		q := expectOneRefused(t, o, w, bad, 5)
		assert.Equal(t, ClassAlert, q.Class)
		assert.Contains(t, q.Reason, reason)
		expectOnce(t, fx, good(0), good(1), good(2), good(3), good(4))
		for f, vs := range fx.read(t, bad, 0) {
			assert.Empty(t, vs, "refused point stored anyway: %s", f)
		}
	})
}

// expectOneRefused checks a flushed batch: the outbox is empty, written
// points were counted, and bad alone is in the quarantine (its entry is
// returned).
func expectOneRefused(t *testing.T, o *Outbox, w *Writer, bad Point, written int) QuarantinedPoint {
	t.Helper()
	depth, _ := o.Stats()
	assert.Zero(t, depth, "the rest flowed")
	assert.Equal(t, float64(written), testutil.ToFloat64(w.metrics.written))
	assert.Equal(t, 1.0, testutil.ToFloat64(o.metrics.quarantined))
	var qs []QuarantinedPoint
	require.NoError(t, o.Quarantine(func(q QuarantinedPoint) error { qs = append(qs, q); return nil }))
	require.Len(t, qs, 1)
	assert.Equal(t, Line(bad), qs[0].Point)
	return qs[0]
}

// numericFields returns the fields of p a numeric store keeps, as numbers
// (bool as 0/1).
func numericFields(p Point) map[string]float64 {
	out := map[string]float64{}
	for f, v := range normalize(p).Fields {
		switch x := v.(type) {
		case float64:
			out[f] = x
		case int64:
			out[f] = float64(x)
		case bool:
			out[f] = 0
			if x {
				out[f] = 1
			}
		}
	}
	return out
}

// TestSinkContractVictoria runs the contract on the InfluxDB v2 sink against
// the real test server (victoria-metrics), behind the refusal proxy.
//
// What the server really exposes, checked by the contract: victoria-metrics
// keeps a revision written at the same timestamp as a second sample beside
// the earlier emission (it does not overwrite as InfluxDB does), so a query
// may return either; its export shows both. It answers 204 to anything, so
// refusal is shown by the proxy answering 400 to a batch holding the poison
// tag, as InfluxDB answers an unparsable point. The outage is the proxy
// taken off its loopback port and put back.
func TestSinkContractVictoria(t *testing.T) {
	base := testenv.Influx(t)
	testSink(t, func(t *testing.T, site string) sinkFixture {
		proxy := newRecordingProxy(t, base, "kind=poison")
		s, err := NewInfluxSink(InfluxOptions{URL: proxy.URL, Org: "lowmead", Bucket: "farm"})
		require.NoError(t, err)
		t.Cleanup(s.Close)
		return sinkFixture{
			sink:           s,
			read:           func(t *testing.T, p Point, want int) map[string][]float64 { return readVM(t, base, p, want) },
			keepsRevisions: true,
			refused: func(p Point) (Point, string) {
				p.Tags = maps.Clone(p.Tags)
				p.Tags["kind"] = "poison"
				return p, "400 Bad Request"
			},
			down: func(*testing.T) { proxy.stop() },
			up:   proxy.start,
		}
	})
}

// readVM reads p's series from victoria-metrics (one series per numeric
// field, named <measurement>_<field>, tags as labels, millisecond time) and
// returns the values at p's time, polling until each field has want.
func readVM(t *testing.T, base string, p Point, want int) map[string][]float64 {
	t.Helper()
	var sel strings.Builder
	fmt.Fprintf(&sel, `{__name__=~%q`, p.Measurement+"_.+")
	for _, k := range sortedKeys(p.Tags) {
		fmt.Fprintf(&sel, `,%s=%q`, k, p.Tags[k])
	}
	sel.WriteString("}")
	fields := numericFields(p)
	deadline := time.Now().Add(40 * time.Second)
	for {
		resp, err := http.Get(base + "/internal/force_flush")
		require.NoError(t, err)
		resp.Body.Close()
		out := map[string][]float64{}
		for f := range fields {
			out[f] = nil
		}
		for _, s := range exportVM(t, base, sel.String()) {
			f, ok := strings.CutPrefix(s.Metric["__name__"], p.Measurement+"_")
			if _, numeric := fields[f]; !ok || !numeric || len(s.Metric) != len(p.Tags)+1 {
				continue
			}
			for i, ts := range s.Timestamps {
				if ts == p.Time.UnixMilli() {
					out[f] = append(out[f], s.Values[i])
				}
			}
		}
		done := !slices.ContainsFunc(slices.Collect(maps.Values(out)), func(vs []float64) bool { return len(vs) < want })
		if want == 0 || done || time.Now().After(deadline) {
			return out
		}
		time.Sleep(300 * time.Millisecond)
	}
}

// TestSinkContractHistory runs the contract on the local history of a
// second state file (an archive): revisions overwrite, a point older than
// the retention is refused, and the file closed (a disk gone) is the outage.
func TestSinkContractHistory(t *testing.T) {
	testSink(t, func(t *testing.T, site string) sinkFixture {
		path := filepath.Join(t.TempDir(), "archive.db")
		db, err := state.Open(path)
		require.NoError(t, err)
		t.Cleanup(func() { _ = db.Close() }) // closed already after an outage test
		archive, err := OpenOutbox(db, OutboxOptions{LocalOnly: true, HistoryRetention: 7 * 24 * time.Hour, Clock: time.Now})
		require.NoError(t, err)
		h := archive.History()
		return sinkFixture{
			sink: h,
			read: func(t *testing.T, p Point, _ int) map[string][]float64 {
				out := map[string][]float64{}
				f := Filter{From: p.Time, To: p.Time.Add(time.Nanosecond), Measurements: []string{p.Measurement}}
				require.NoError(t, h.Range(f, func(q Point) error {
					if maps.Equal(q.Tags, p.Tags) {
						for k, v := range numericFields(q) {
							out[k] = append(out[k], v)
						}
					}
					return nil
				}))
				return out
			},
			refused: func(p Point) (Point, string) {
				p.Time = time.Now().Add(-8 * 24 * time.Hour).Truncate(time.Hour)
				return p, "older than the store retention"
			},
			down: func(t *testing.T) { require.NoError(t, h.db.Close()) },
			up: func(t *testing.T) {
				db, err := state.Open(path)
				require.NoError(t, err)
				t.Cleanup(func() { require.NoError(t, db.Close()) })
				h.db = db // the disk is back: same file, opened again
			},
		}
	})
}

// TestInfluxSinkOutageWhileSplitting: a batch refused as invalid is split
// in halves; when the server fails after the first half was accepted, that
// half leaves the outbox and the rest (including a point the sink refuses
// by its time check, further on) stays pending for the retry.
func TestInfluxSinkOutageWhileSplitting(t *testing.T) {
	var mu sync.Mutex
	answers := []int{http.StatusBadRequest, http.StatusNoContent, http.StatusServiceUnavailable}
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		mu.Lock()
		code := http.StatusNoContent
		if len(answers) > 0 {
			code, answers = answers[0], answers[1:]
		}
		mu.Unlock()
		w.WriteHeader(code)
	}))
	t.Cleanup(srv.Close)

	db := openTestDB(t)
	o := openTestOutbox(t, db, OutboxOptions{Clock: time.Now, Registerer: prometheus.NewRegistry()})
	w := newTestWriter(t, o, srv.URL, prometheus.NewRegistry(), nil)
	t.Cleanup(w.Close)
	pt := func(h int) Point {
		return ZonePoint("lowmead", "field-7", realNow.Add(time.Duration(h-10)*time.Hour), map[string]any{"depletion_mm": float64(h)})
	}
	future := pt(3)
	future.Time = realNow.Add(72 * time.Hour)
	enqueue(t, db, o, pt(0), pt(1), pt(2), future, pt(4))

	require.NoError(t, w.Flush(context.Background()))
	assert.Equal(t, []string{Line(pt(2)), Line(future), Line(pt(4))}, pending(t, o), "the accepted half left, the rest waits")
	assert.Equal(t, 2.0, testutil.ToFloat64(w.metrics.written))
	assert.Equal(t, 1.0, testutil.ToFloat64(w.metrics.errors))
	assert.Zero(t, testutil.ToFloat64(o.metrics.quarantined), "nothing past the outage is settled")

	require.NoError(t, w.Flush(context.Background()))
	assert.Empty(t, pending(t, o))
	assert.Equal(t, 4.0, testutil.ToFloat64(w.metrics.written))
	assert.Equal(t, 1.0, testutil.ToFloat64(o.metrics.quarantined), "the future point, at the retry")
}
