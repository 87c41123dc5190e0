package faults_test

import (
	"bufio"
	"bytes"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"net/http/httputil"
	"net/url"
	"os"
	"regexp"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"etpulse/gateway/internal/testenv"
)

// storeProxy stands in front of the test store (victoria-metrics, when the
// script gives one; else it answers 204 itself) on 127.0.0.1. While down it
// refuses every request with 503; otherwise it records each line of every
// write it forwards and the store accepts, in order.
type storeProxy struct {
	srv  *httptest.Server
	down atomic.Bool

	mu    sync.Mutex
	lines []string
}

func newStoreProxy(t *testing.T) *storeProxy {
	t.Helper()
	p := &storeProxy{}
	var rp *httputil.ReverseProxy
	if base := os.Getenv("ETPULSE_TEST_INFLUX"); base != "" {
		u, err := url.Parse(base)
		require.NoError(t, err)
		rp = httputil.NewSingleHostReverseProxy(u)
	}
	p.srv = httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if p.down.Load() {
			http.Error(w, "store outage (fault suite)", http.StatusServiceUnavailable)
			return
		}
		var body []byte
		if r.URL.Path == "/api/v2/write" {
			b, err := io.ReadAll(r.Body)
			if err != nil {
				http.Error(w, err.Error(), http.StatusBadRequest)
				return
			}
			body = b
			r.Body = io.NopCloser(bytes.NewReader(b))
		}
		rec := &statusWriter{ResponseWriter: w, code: http.StatusOK}
		if rp != nil {
			rp.ServeHTTP(rec, r)
		} else {
			rec.WriteHeader(http.StatusNoContent)
		}
		if body != nil && rec.code/100 == 2 {
			p.mu.Lock()
			sc := bufio.NewScanner(bytes.NewReader(body))
			sc.Buffer(make([]byte, 1<<20), 1<<20)
			for sc.Scan() {
				if l := strings.TrimSpace(sc.Text()); l != "" {
					p.lines = append(p.lines, l)
				}
			}
			p.mu.Unlock()
		}
	}))
	t.Cleanup(p.srv.Close)
	return p
}

type statusWriter struct {
	http.ResponseWriter
	code int
}

func (s *statusWriter) WriteHeader(code int) {
	s.code = code
	s.ResponseWriter.WriteHeader(code)
}

var (
	lpStation  = regexp.MustCompile(`[,]station=([^, ]+)`)
	lpRevision = regexp.MustCompile(`[ ,]revision=(\d+)i?`)
)

// hourPoints returns, in arrival order, the key station/time/revision of
// each et_hour point the store accepted, and each point's full line.
func (p *storeProxy) hourPoints() (keys, lines []string) {
	p.mu.Lock()
	defer p.mu.Unlock()
	for _, l := range p.lines {
		if !strings.HasPrefix(l, "et_hour,") {
			continue
		}
		st, rev := lpStation.FindStringSubmatch(l), lpRevision.FindStringSubmatch(l)
		f := strings.Fields(l)
		if st == nil || rev == nil || len(f) < 3 {
			continue
		}
		keys = append(keys, st[1]+"/"+f[len(f)-1]+"/"+rev[1])
		lines = append(lines, l)
	}
	return keys, lines
}

// faultStoreOutage refuses every store request twice for a few seconds
// while the stream flows: every hourly point must reach the store exactly
// once (no revision twice, none missing) and each station's first
// emissions in hour order.
func faultStoreOutage(t *testing.T, s *suite) result {
	sc := newScript()
	ref := s.reference(t, sc)
	b := testenv.NewMosquitto(t, false)
	proxy := newStoreProxy(t)
	rl := watchRecords(t, b.URL)
	g := newGW(t, s.bin, t.TempDir(), sc, cfgOptions{broker: b.URL, storeURL: proxy.srv.URL})
	g.start()
	pub := newPublisher(t, b.URL, "faults-pub")
	const outages = 2
	parts := chunks(sc.msgs, 2*outages+1)
	for i, part := range parts {
		proxy.down.Store(i%2 == 1) // chunks 1 and 3 flow during an outage
		pub.publish(t, part)
		if i%2 == 1 {
			rl.await(0, 2*time.Second, 10*time.Second) // the records of the chunk close while the store is down
		}
	}
	proxy.down.Store(false)
	rl.await(sc.hours(), time.Second, 90*time.Second)
	got, conflicts := rl.snapshot()
	// Every revision published over MQTT must reach the store.
	want := map[string]bool{}
	rl.mu.Lock()
	for k := range rl.byRev {
		want[k] = true
	}
	rl.mu.Unlock()
	deadline := time.Now().Add(60 * time.Second)
	for time.Now().Before(deadline) {
		keys, _ := proxy.hourPoints()
		if len(keys) >= len(want) {
			break
		}
		time.Sleep(100 * time.Millisecond)
	}
	require.Equal(t, 0, g.signal(sigTERM))
	keys, lines := proxy.hourPoints()
	seen, dup, order := map[string]string{}, 0, 0
	var detail []string
	lastStart := map[string]string{}
	for i, k := range keys {
		if old, ok := seen[k]; ok {
			dup++
			if old != lines[i] {
				detail = append(detail, k+" twice, different")
			} else {
				detail = append(detail, k+" twice")
			}
		}
		seen[k] = lines[i]
		parts := strings.Split(k, "/")
		if parts[2] == "0" {
			if parts[1] <= lastStart[parts[0]] {
				order++
				detail = append(detail, k+" out of order")
			}
			lastStart[parts[0]] = parts[1]
		}
	}
	lost := 0
	for k := range want {
		// want keys are station/RFC3339/revision; store keys station/ns/revision.
		f := strings.Split(k, "/")
		ts, err := time.Parse(time.RFC3339, f[1])
		require.NoError(t, err)
		if _, ok := seen[fmt.Sprintf("%s/%d/%s", f[0], ts.UnixNano(), f[2])]; !ok {
			lost++
			detail = append(detail, k+" never stored")
		}
	}
	l2, phantom, d2 := compareRecords(ref, got)
	detail = append(detail, d2...)
	d := fmt.Sprintf("points=%d out_of_order=%d", len(keys), order)
	if len(detail) > 0 {
		d += " (" + join(detail, 6) + ")"
	}
	return result{name: "store-outage", trials: outages, lost: lost + l2 + phantom + order, duplicated: dup + conflicts, detail: d}
}
