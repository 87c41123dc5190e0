package store

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"log"
	"maps"
	"net"
	"net/http"
	"net/http/httptest"
	"net/http/httputil"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// realNow is a wall clock anchored to whole hours, so the writer's time
// checks see realistic timestamps.
var realNow = time.Now().UTC().Truncate(time.Hour)

func newTestWriter(t testing.TB, o *Outbox, url string, reg prometheus.Registerer, edit func(*WriterOptions)) *Writer {
	t.Helper()
	opt := WriterOptions{URL: url, Org: "lowmead", Bucket: "farm", Registerer: reg,
		MinBackoff: 20 * time.Millisecond, MaxBackoff: 200 * time.Millisecond, FlushInterval: 10 * time.Millisecond}
	if edit != nil {
		edit(&opt)
	}
	w, err := NewWriter(o, opt)
	require.NoError(t, err)
	return w
}

// expectInVM checks every numeric field of every point, as victoria-metrics
// stores it: series <measurement>_<field>, tags as labels, millisecond time.
func expectInVM(t *testing.T, ss []vmSeries, pts []Point) {
	t.Helper()
	got := map[string]map[int64][]float64{}
	for _, s := range ss {
		k := labelKey(s.Metric)
		if got[k] == nil {
			got[k] = map[int64][]float64{}
		}
		for i, ts := range s.Timestamps {
			got[k][ts] = append(got[k][ts], s.Values[i])
		}
	}
	for _, p := range pts {
		for f, v := range normalize(p).Fields {
			var want float64
			switch x := v.(type) {
			case float64:
				want = x
			case int64:
				want = float64(x)
			case bool:
				if x {
					want = 1
				}
			default:
				continue
			}
			labels := maps.Clone(p.Tags)
			if labels == nil {
				labels = map[string]string{}
			}
			labels["__name__"] = p.Measurement + "_" + f
			vals := got[labelKey(labels)][p.Time.UnixMilli()]
			if assert.Len(t, vals, 1, "%v at %s", labels, p.Time) {
				assert.InDelta(t, want, vals[0], 1e-12, "%v at %s", labels, p.Time)
			}
		}
	}
}

func labelKey(m map[string]string) string {
	var b strings.Builder
	for _, k := range sortedKeys(m) {
		fmt.Fprintf(&b, "%s=%q,", k, m[k])
	}
	return b.String()
}

func TestWriteRoundTripVictoria(t *testing.T) {
	base := testenv.Influx(t)
	db := openTestDB(t)
	site := uniqueSite("kestrel-ridge")
	o := openTestOutbox(t, db, OutboxOptions{RawSummaries: true, Clock: func() time.Time { return realNow }})
	rec := example19Record()
	rec.Site, rec.Start = site, realNow.Add(-3*time.Hour)
	at := realNow.Add(-2 * time.Hour)
	others := []Point{
		ZonePoint(site, "pear-3", at, map[string]any{"depletion_mm": 23.4, "etc_mm": 0.51, "kc": 1.05}),
		CommandPoint(site, "pear-3", at, map[string]any{"minutes": 37, "depth_mm": 12.0}),
		ReportPoint(site, "pear-3", at.Add(time.Hour), map[string]any{"ran_minutes": 36, "applied_mm": 11.7, "acked": true}),
		AlertPoint(site, "mast", "rh-1", "stuck", at, map[string]any{"active": true, "value": 100.0}),
	}
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
		if err := o.HandleHour(tx, rec); err != nil {
			return err
		}
		return o.Enqueue(tx, others...)
	}))
	want := append(append(HourPoints(rec), RawPoints(rec)...), others...)
	depth, _ := o.Stats()
	require.Equal(t, len(want), depth)

	reg := prometheus.NewRegistry()
	w := newTestWriter(t, o, base, reg, nil)
	require.NoError(t, w.Flush(context.Background()))
	depth, _ = o.Stats()
	assert.Zero(t, depth)
	assert.Equal(t, float64(len(want)), testutil.ToFloat64(w.metrics.written))
	assert.Equal(t, 1, testutil.CollectAndCount(w.metrics.duration))

	fields := 0
	for _, p := range want {
		for _, v := range p.Fields {
			if _, isText := v.(string); !isText {
				fields++
			}
		}
	}
	ss := waitVM(t, base, fmt.Sprintf(`{site=%q}`, site), fields)
	assert.Equal(t, fields, samples(ss), "one sample per numeric field, nothing else")
	expectInVM(t, ss, want)
}

// recordingProxy forwards to a real server and records the lines of every
// request the server accepted, in order. It returns 502 while the server is
// down, like a broken uplink. With poison set, a request holding that text
// is refused with 400, as InfluxDB refuses a batch with an unparsable point
// (victoria-metrics accepts anything with 204). stop and start take the
// proxy itself off and back on its loopback port (connection refused in
// between, like a cut uplink).
type recordingProxy struct {
	URL      string
	addr     string
	handler  http.Handler
	mu       sync.Mutex
	srv      *http.Server
	accepted []string
	requests int
}

func newRecordingProxy(t *testing.T, upstream, poison string) *recordingProxy {
	t.Helper()
	u, err := url.Parse(upstream)
	require.NoError(t, err)
	rp := httputil.NewSingleHostReverseProxy(u)
	rp.ErrorLog = log.New(io.Discard, "", 0) // 502 while the server is down is expected
	p := &recordingProxy{addr: "127.0.0.1:0"}
	p.handler = http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		body, err := io.ReadAll(r.Body)
		if err != nil {
			http.Error(w, err.Error(), http.StatusBadRequest)
			return
		}
		p.mu.Lock()
		p.requests++
		p.mu.Unlock()
		if poison != "" && strings.Contains(string(body), poison) {
			w.Header().Set("Content-Type", "application/json")
			w.WriteHeader(http.StatusBadRequest)
			fmt.Fprintf(w, `{"code":"invalid","message":"unable to parse points: %s refused"}`, poison)
			return
		}
		r.Body = io.NopCloser(strings.NewReader(string(body)))
		rec := httptest.NewRecorder()
		rp.ServeHTTP(rec, r)
		if rec.Code == http.StatusNoContent {
			p.mu.Lock()
			p.accepted = append(p.accepted, strings.Split(string(body), "\n")...)
			p.mu.Unlock()
		}
		maps.Copy(w.Header(), rec.Header())
		w.WriteHeader(rec.Code)
		_, _ = w.Write(rec.Body.Bytes())
	})
	p.start(t)
	t.Cleanup(p.stop)
	return p
}

// start listens again on the proxy's port (a free one the first time).
func (p *recordingProxy) start(t *testing.T) {
	t.Helper()
	l, err := net.Listen("tcp", p.addr)
	require.NoError(t, err)
	p.addr = l.Addr().String()
	p.URL = "http://" + p.addr
	srv := &http.Server{Handler: p.handler, ErrorLog: log.New(io.Discard, "", 0)}
	p.mu.Lock()
	p.srv = srv
	p.mu.Unlock()
	go func() { _ = srv.Serve(l) }()
}

// stop closes the listener and every open connection.
func (p *recordingProxy) stop() {
	p.mu.Lock()
	srv := p.srv
	p.srv = nil
	p.mu.Unlock()
	if srv != nil {
		_ = srv.Close()
	}
}

func (p *recordingProxy) lines() []string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return slices.Clone(p.accepted)
}

func runWriter(t *testing.T, w *Writer) (stop func()) {
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- w.Run(ctx) }()
	return func() {
		cancel()
		require.NoError(t, <-done)
	}
}

func waitFor(t *testing.T, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(60 * time.Second)
	for !cond() {
		require.True(t, time.Now().Before(deadline), "timed out waiting for %s", what)
		time.Sleep(20 * time.Millisecond)
	}
}

// farmHour returns the points of one simulated hour of the invented
// "Kestrel Ridge" orchard: two stations and one zone.
func farmHour(site string, h time.Time, rev int) []Point {
	var pts []Point
	for i, st := range []string{"north-mast", "creek-mast"} {
		rec := example19Record()
		rec.Site, rec.Station, rec.Start, rec.Revision = site, st, h, rev
		rec.Result.ET = 0.1*float64(h.Hour()%12) + 0.01*float64(i) + 0.001*float64(rev)
		pts = append(pts, HourPoints(rec)...)
	}
	pts = append(pts, ZonePoint(site, "pear-3", h, map[string]any{"depletion_mm": float64(h.Hour()) + 0.25}))
	return pts
}

func TestOutageExactlyOnceInOrder(t *testing.T) {
	vm := startOwnVM(t)
	proxy := newRecordingProxy(t, vm.url(), "")
	db := openTestDB(t)
	site := uniqueSite("kestrel-ridge")
	o := openTestOutbox(t, db, OutboxOptions{Clock: time.Now})
	reg := prometheus.NewRegistry()
	w := newTestWriter(t, o, proxy.URL, reg, func(o *WriterOptions) { o.BatchSize = 5 })
	stop := runWriter(t, w)
	defer stop()

	var order []Point // every point in enqueue order, superseded ones removed
	produce := func(pts []Point) {
		enqueue(t, db, o, pts...)
		for _, p := range pts {
			order = slices.DeleteFunc(order, func(q Point) bool {
				return q.Measurement == p.Measurement && maps.Equal(q.Tags, p.Tags) && q.Time.Equal(p.Time)
			})
			order = append(order, p)
		}
	}
	h0 := realNow.Add(-12 * time.Hour)
	produce(farmHour(site, h0, 0))
	waitFor(t, "first hour written", func() bool { d, _ := o.Stats(); return d == 0 })

	vm.stop(t)
	for h := 1; h <= 8; h++ {
		produce(farmHour(site, h0.Add(time.Duration(h)*time.Hour), 0))
		if h == 5 {
			// A late reading revises hour 3 while it is still pending.
			produce(farmHour(site, h0.Add(3*time.Hour), 1))
		}
	}
	waitFor(t, "write errors during the outage", func() bool { return testutil.ToFloat64(w.metrics.errors) >= 2 })
	depth, oldest := o.Stats()
	assert.Equal(t, 8*3, depth, "revision replaced its pending hour")
	assert.Positive(t, oldest)

	vm.start(t)
	waitFor(t, "outbox drained after the outage", func() bool { d, _ := o.Stats(); return d == 0 })

	// Exactly once and in order: the server accepted each line once, in
	// enqueue order.
	want := make([]string, len(order))
	for i, p := range order {
		want[i] = Line(p)
	}
	assert.Equal(t, want, proxy.lines())

	nFields := 0
	for _, p := range order {
		nFields += len(p.Fields)
	}
	ss := waitVM(t, vm.url(), fmt.Sprintf(`{site=%q}`, site), nFields)
	assert.Equal(t, nFields, samples(ss), "no sample twice")
	expectInVM(t, ss, order)
	rev := byName(t, exportVM(t, vm.url(), fmt.Sprintf(`{__name__="et_hour_revision",site=%q,station="north-mast"}`, site)))
	s := rev["et_hour_revision"]
	i := slices.Index(s.Timestamps, h0.Add(3*time.Hour).UnixMilli())
	require.GreaterOrEqual(t, i, 0)
	assert.Equal(t, 1.0, s.Values[i], "the revision is what the store holds")
}

// TestDrainChild is the drain process that TestKillDuringDrain kills; it
// only runs when started by that test.
func TestDrainChild(t *testing.T) {
	path, url := os.Getenv("ETPULSE_STORE_CHILD_STATE"), os.Getenv("ETPULSE_STORE_CHILD_URL")
	if path == "" {
		t.Skip("started only by TestKillDuringDrain")
	}
	db, err := state.Open(path)
	require.NoError(t, err)
	o, err := OpenOutbox(db, OutboxOptions{})
	require.NoError(t, err)
	reg := prometheus.NewRegistry()
	w := newTestWriter(t, o, url, reg, func(o *WriterOptions) { o.BatchSize = 10; o.BackfillRate = 300 })
	go func() {
		for {
			fmt.Printf("written %d\n", int(testutil.ToFloat64(w.metrics.written)))
			time.Sleep(5 * time.Millisecond)
		}
	}()
	require.NoError(t, w.Run(context.Background())) // runs until killed
}

func TestKillDuringDrain(t *testing.T) {
	vm := startOwnVM(t)
	site := uniqueSite("kestrel-ridge")
	path := filepath.Join(t.TempDir(), "state.db")
	db, err := state.Open(path)
	require.NoError(t, err)
	o, err := OpenOutbox(db, OutboxOptions{})
	require.NoError(t, err)
	var all []Point
	h0 := realNow.Add(-200 * time.Hour)
	for h := range 150 {
		pts := farmHour(site, h0.Add(time.Duration(h)*time.Hour), 0)
		enqueue(t, db, o, pts...)
		all = append(all, pts...)
	}
	require.NoError(t, db.Close())

	cmd := exec.Command(os.Args[0], "-test.run=^TestDrainChild$", "-test.count=1")
	cmd.Env = append(os.Environ(), "ETPULSE_STORE_CHILD_STATE="+path, "ETPULSE_STORE_CHILD_URL="+vm.url())
	out, err := cmd.StdoutPipe()
	require.NoError(t, err)
	require.NoError(t, cmd.Start())
	sc := bufio.NewScanner(out)
	killedAt := -1
	for sc.Scan() {
		if n, ok := strings.CutPrefix(sc.Text(), "written "); ok {
			if v, _ := strconv.Atoi(n); v >= 120 {
				require.NoError(t, cmd.Process.Kill()) // SIGKILL mid-drain
				killedAt = v
				break
			}
		}
	}
	_ = cmd.Wait()
	require.GreaterOrEqual(t, killedAt, 120, "child never reported progress")

	db, err = state.Open(path)
	require.NoError(t, err)
	defer db.Close()
	o, err = OpenOutbox(db, OutboxOptions{})
	require.NoError(t, err)
	depth, _ := o.Stats()
	require.Positive(t, depth, "killed before the end of the drain")
	require.Less(t, depth, len(all)-killedAt+1, "accepted points were removed")
	t.Logf("killed after %d of %d points; %d pending at restart", killedAt, len(all), depth)

	w := newTestWriter(t, o, vm.url(), nil, nil)
	require.NoError(t, w.Flush(context.Background()))
	depth, _ = o.Stats()
	require.Zero(t, depth)

	nFields := 0
	for _, p := range all {
		nFields += len(p.Fields)
	}
	ss := waitVM(t, vm.url(), fmt.Sprintf(`{site=%q}`, site), nFields)
	// Exactly once in effect: every (series, time) present; a batch in flight
	// at the kill may have been stored twice with identical values
	// (victoria-metrics keeps duplicates unless deduplication is on).
	distinct, dup := 0, 0
	for _, s := range ss {
		seen := map[int64]float64{}
		for i, ts := range s.Timestamps {
			if v, ok := seen[ts]; ok {
				dup++
				assert.Equal(t, v, s.Values[i], "a duplicate carries the same value")
				continue
			}
			seen[ts] = s.Values[i]
			distinct++
		}
	}
	assert.Equal(t, nFields, distinct)
	assert.LessOrEqual(t, dup, 10*len(all[0].Fields), "at most the batch in flight twice")
	t.Logf("%d distinct samples, %d duplicated by the kill", distinct, dup)
}

func TestRejectedPointsQuarantined(t *testing.T) {
	base := testenv.Influx(t)
	site := uniqueSite("lowmead")
	at := realNow.Add(-10 * time.Hour)
	good := func(h int) Point {
		return ZonePoint(site, "field-7", at.Add(time.Duration(h)*time.Hour), map[string]any{"depletion_mm": float64(h)})
	}

	t.Run("validation", func(t *testing.T) {
		db := openTestDB(t)
		o := openTestOutbox(t, db, OutboxOptions{Clock: time.Now})
		future := good(0)
		future.Time = realNow.Add(72 * time.Hour) // victoria-metrics would answer 204 and drop it
		nan := good(1)
		nan.Fields = map[string]any{"depletion_mm": 0.0 / zero()}
		enqueue(t, db, o, good(0), future, nan, good(1), good(2))
		w := newTestWriter(t, o, base, nil, nil)
		require.NoError(t, w.Flush(context.Background()))
		depth, _ := o.Stats()
		require.Zero(t, depth)
		var reasons []string
		require.NoError(t, o.Quarantine(func(q QuarantinedPoint) error { reasons = append(reasons, q.Reason); return nil }))
		require.Len(t, reasons, 2)
		assert.Contains(t, reasons[0], "NaN is not a finite number")
		assert.Contains(t, reasons[1], "more than 48h0m0s ahead")
		ss := waitVM(t, base, fmt.Sprintf(`{site=%q}`, site), 3)
		expectInVM(t, ss, []Point{good(0), good(1), good(2)})
		assert.Equal(t, 3, samples(ss))
	})

	t.Run("refused by the server", func(t *testing.T) {
		proxy := newRecordingProxy(t, base, "kind=poison")
		db := openTestDB(t)
		o := openTestOutbox(t, db, OutboxOptions{Clock: time.Now})
		bad := AlertPoint(site, "mast", "", "poison", at, map[string]any{"active": true})
		pts := []Point{good(3), good(4), good(5), bad, good(6), good(7)}
		enqueue(t, db, o, pts...)
		reg := prometheus.NewRegistry()
		w := newTestWriter(t, o, proxy.URL, reg, nil)
		require.NoError(t, w.Flush(context.Background()))
		q := expectOneRefused(t, o, w, bad, 5)
		assert.Contains(t, q.Reason, "400 Bad Request")
		assert.Contains(t, q.Reason, "kind=poison refused")
		ss := waitVM(t, base, fmt.Sprintf(`{site=%q,zone="field-7"}`, site), 8)
		expectInVM(t, ss, []Point{good(3), good(4), good(5), good(6), good(7)})
	})
}

func zero() float64 { return 0 }

func TestFlushWithServerDownKeepsPoints(t *testing.T) {
	db := openTestDB(t)
	o := openTestOutbox(t, db, OutboxOptions{Clock: time.Now})
	enqueue(t, db, o, zonePt("z1", 0, 1), zonePt("z1", 1, 2))
	reg := prometheus.NewRegistry()
	// A loopback port nothing listens on: the uplink is down.
	w := newTestWriter(t, o, "http://127.0.0.1:"+strconv.Itoa(freePort(t)), reg, nil)
	require.NoError(t, w.Flush(context.Background()), "a down server is not a shutdown failure")
	depth, _ := o.Stats()
	assert.Equal(t, 2, depth)
	assert.Equal(t, 1.0, testutil.ToFloat64(w.metrics.errors))
	assert.Zero(t, testutil.ToFloat64(w.metrics.written))
}

var _ = hourly.FAO56
