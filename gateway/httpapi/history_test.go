package httpapi

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"net/url"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/store"
)

// historyAt is the first hour of the invented "Lowmead" history below.
var historyAt = time.Date(2024, 6, 11, 9, 0, 0, 0, time.UTC)

// hourPoint is one invented hourly record of station st at historyAt+h.
func hourPoint(st string, h int, et float64) store.Point {
	return store.Point{Class: store.ClassHour, Measurement: store.MeasurementHour,
		Tags:   map[string]string{"site": "lowmead", "station": st, "reference": "short"},
		Fields: map[string]any{"et_mm": et, "revision": int64(0), "complete": true},
		Notes:  map[string]string{"flags": "wind:floor"},
		Time:   historyAt.Add(time.Duration(h) * time.Hour)}
}

// historyFixture opens a state file whose local history holds two stations'
// hours, one of them named with the characters CSV, line protocol and URLs
// must escape, and a zone step with a note holding a comma and quotes.
func historyFixture(t *testing.T) (*bbolt.DB, *store.Outbox) {
	t.Helper()
	db := openDB(t)
	o, err := store.OpenOutbox(db, store.OutboxOptions{LocalOnly: true})
	require.NoError(t, err)
	zone := store.ZonePoint("lowmead", "field 7", historyAt.Add(time.Hour), map[string]any{"depletion_mm": 14.2})
	zone.Notes = map[string]string{"why": "hand run, \"after\" the repair"}
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
		return o.Enqueue(tx, hourPoint("east-mast", 0, 0.42), hourPoint("west mast, \"old\"&=", 0, 0.39), zone)
	}))
	return db, o
}

// fetch GETs base+path and returns the status, the content type, the body
// and the trailers.
func fetch(t *testing.T, u string) (int, string, string, http.Header) {
	t.Helper()
	resp, err := http.Get(u)
	require.NoError(t, err)
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	require.NoError(t, err)
	return resp.StatusCode, resp.Header.Get("Content-Type"), string(b), resp.Trailer
}

// TestHistoryRouteStreamsTheExport: the route prints exactly what the store's
// export functions print for the same query, in both formats, with the
// number of points in the trailer; a station whose name needs escaping is
// found when the client encodes the query as Values does.
func TestHistoryRouteStreamsTheExport(t *testing.T) {
	_, o := historyFixture(t)
	base := start(t, Options{Gatherer: prometheus.NewRegistry(), History: o.History()})

	all := store.Filter{From: historyAt, To: historyAt.Add(24 * time.Hour)}
	var want bytes.Buffer
	n, err := store.ExportCSV(&want, o.History(), all)
	require.NoError(t, err)
	require.Equal(t, 3, n)
	code, ctype, body, tr := fetch(t, base+HistoryPath+"?from=2024-06-11&to=2024-06-12")
	require.Equal(t, http.StatusOK, code, body)
	assert.Equal(t, "text/csv; charset=utf-8", ctype)
	assert.Equal(t, want.String(), body)
	assert.Contains(t, body, `,"hand run, ""after"" the repair"`, "CSV quotes a note with a comma and quotes")
	assert.Equal(t, "3", tr.Get(TrailerPoints))
	assert.Empty(t, tr.Get(TrailerError))

	q := HistoryQuery{Filter: store.Filter{From: historyAt, To: historyAt.Add(time.Hour), Station: `west mast, "old"&=`}, Format: "lp"}
	want.Reset()
	n, err = store.ExportLineProtocol(&want, o.History(), q.Filter)
	require.NoError(t, err)
	require.Equal(t, 1, n)
	code, ctype, body, tr = fetch(t, base+HistoryPath+"?"+q.Values().Encode())
	require.Equal(t, http.StatusOK, code, body)
	assert.Equal(t, "text/plain; charset=utf-8", ctype)
	assert.Equal(t, want.String(), body)
	assert.Equal(t, `et_hour,reference=short,site=lowmead,station=west\ mast\,\ "old"&\= complete=true,et_mm=0.39,revision=0i 1718096400000000000`+"\n", body)
	assert.Equal(t, "1", tr.Get(TrailerPoints))

	// A UTC offset encoded as %2B is the same instant.
	code, _, body, _ = fetch(t, base+HistoryPath+"?from=2024-06-11T11:00:00%2B02:00&to=2024-06-11T10:00&measurement=et_hour&format=csv")
	require.Equal(t, http.StatusOK, code, body)
	assert.Equal(t, 3, strings.Count(body, "\n"), "header and two stations' hour: %s", body)
}

// TestHistoryRouteRefusesBadQueries: each bad parameter gets a 400 naming it
// and the fix, as plain text (a value echoed back is never HTML); a POST is
// refused; a server without history answers 503.
func TestHistoryRouteRefusesBadQueries(t *testing.T) {
	_, o := historyFixture(t)
	base := start(t, Options{Gatherer: prometheus.NewRegistry(), History: o.History()})
	for _, c := range []struct{ query, want string }{
		{"to=2024-06-12", "bad query: from: required: give a time such as 2024-07-03 (UTC)"},
		{"from=2024-06-11", "bad query: to: required"},
		{"from=yesterday&to=2024-06-12", `bad query: from: parse time "yesterday": want RFC 3339`},
		{"from=2024-06-11T10:00:00+02:00&to=2024-06-12", "in a URL write the + of a UTC offset as %2B"},
		{"from=2024-06-12&to=2024-06-11", "bad query: to: 2024-06-11T00:00:00Z is not after the start 2024-06-12T00:00:00Z"},
		{"from=2024-06-11&to=2024-06-12&format=json", `bad query: format: must be csv or lp, got "json"`},
		{"from=2024-06-11&to=2024-06-12&measurement=et_hour,et_day", `bad query: measurement: unknown measurement "et_day"; give a comma-separated list of et_hour,`},
		{"from=2024-06-11&to=2024-06-12&stn=east-mast", `bad query: unknown parameter "stn"; known: from, to, station, measurement, format`},
		{"from=2024-06-11&to=2024-06-12&station=a&station=b", "bad query: station given 2 times; give it once"},
		{"from=%3Cscript%3E&to=2024-06-12", `bad query: from: parse time "<script>"`},
	} {
		code, ctype, body, _ := fetch(t, base+HistoryPath+"?"+c.query)
		assert.Equal(t, http.StatusBadRequest, code, c.query)
		assert.Equal(t, "text/plain; charset=utf-8", ctype, c.query)
		assert.Contains(t, body, c.want, c.query)
	}

	resp, err := http.Post(base+HistoryPath+"?from=2024-06-11&to=2024-06-12", "text/plain", nil)
	require.NoError(t, err)
	resp.Body.Close()
	assert.Equal(t, http.StatusMethodNotAllowed, resp.StatusCode)

	bare := start(t, Options{Gatherer: prometheus.NewRegistry()})
	code, _, body, _ := fetch(t, bare+HistoryPath+"?from=2024-06-11&to=2024-06-12")
	assert.Equal(t, http.StatusServiceUnavailable, code)
	assert.Contains(t, body, "this gateway keeps no local history")
}

// TestHistoryRouteWhileWriting reads the history over and over while another
// goroutine commits hours to the same file: every response is complete
// (trailer count equals its rows), holds every hour committed before the
// request and only hours committed so far.
func TestHistoryRouteWhileWriting(t *testing.T) {
	db, o := historyFixture(t)
	base := start(t, Options{Gatherer: prometheus.NewRegistry(), History: o.History()})
	const hours = 200
	var mu sync.Mutex
	committed := 0
	done := make(chan error, 1)
	go func() {
		for h := 1; h <= hours; h++ {
			err := db.Update(func(tx *bbolt.Tx) error { return o.Enqueue(tx, hourPoint("east-mast", h, 0.01*float64(h))) })
			if err != nil {
				done <- err
				return
			}
			mu.Lock()
			committed = h
			mu.Unlock()
		}
		done <- nil
	}()
	q := "?from=2024-06-01&to=2024-08-01&station=east-mast&format=lp"
	reads := 0
	for finished := false; !finished; reads++ {
		select {
		case err := <-done:
			require.NoError(t, err)
			finished = true
		default:
		}
		mu.Lock()
		before := committed
		mu.Unlock()
		code, _, body, tr := fetch(t, base+HistoryPath+q)
		require.Equal(t, http.StatusOK, code, body)
		lines := strings.Count(body, "\n")
		assert.Equal(t, fmt.Sprint(lines), tr.Get(TrailerPoints), "complete response")
		assert.GreaterOrEqual(t, lines, before+1, "hours committed before the request")
		assert.LessOrEqual(t, lines, hours+1)
	}
	_, _, body, _ := fetch(t, base+HistoryPath+q)
	assert.Equal(t, hours+1, strings.Count(body, "\n"))
	t.Logf("%d reads while %d hours were committed", reads, hours)
}

// TestFetchHistory: the client copies what the route streams and returns
// its count; nothing listening, or a server without the route, is
// ErrNoGateway (the caller falls back to the file); a refused query is an
// error with the server's reason.
func TestFetchHistory(t *testing.T) {
	_, o := historyFixture(t)
	base := start(t, Options{Gatherer: prometheus.NewRegistry(), History: o.History()})
	q := HistoryQuery{Filter: store.Filter{From: historyAt, To: historyAt.Add(24 * time.Hour), Measurements: []string{store.MeasurementZone}}, Format: "csv"}
	var out bytes.Buffer
	n, err := FetchHistory(context.Background(), base, q, "", &out)
	require.NoError(t, err)
	assert.Equal(t, 1, n)
	assert.Equal(t, "time,measurement,site,zone,depletion_mm,why\n2024-06-11T10:00:00Z,zone_step,lowmead,field 7,14.2,\"hand run, \"\"after\"\" the repair\"\n", out.String())

	ln, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	closed := "http://" + ln.Addr().String()
	require.NoError(t, ln.Close())
	out.Reset()
	_, err = FetchHistory(context.Background(), closed, q, "", &out)
	assert.ErrorIs(t, err, ErrNoGateway)
	assert.Empty(t, out.String())

	other := http.Server{Handler: http.NotFoundHandler()}
	ln, err = net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	go func() { _ = other.Serve(ln) }()
	t.Cleanup(func() { _ = other.Close() })
	_, err = FetchHistory(context.Background(), "http://"+ln.Addr().String(), q, "", &out)
	assert.ErrorIs(t, err, ErrNoGateway)
	assert.Contains(t, err.Error(), "has no /api/v1/history route")

	bare := start(t, Options{Gatherer: prometheus.NewRegistry()})
	_, err = FetchHistory(context.Background(), bare, q, "", &out)
	require.Error(t, err)
	assert.False(t, errors.Is(err, ErrNoGateway))
	assert.Contains(t, err.Error(), "503 Service Unavailable: this gateway keeps no local history")
	assert.Empty(t, out.String())
}

func TestBaseURL(t *testing.T) {
	for listen, want := range map[string]string{
		"127.0.0.1:9470": "http://127.0.0.1:9470",
		":9470":          "http://127.0.0.1:9470",
		"0.0.0.0:9470":   "http://127.0.0.1:9470",
		"[::]:9470":      "http://[::1]:9470",
		"[::1]:9470":     "http://[::1]:9470",
		"box.lan:80":     "http://box.lan:80",
	} {
		got, err := BaseURL(listen)
		require.NoError(t, err, listen)
		assert.Equal(t, want, got, listen)
	}
	_, err := BaseURL("9470")
	assert.ErrorContains(t, err, `http.listen "9470"`)
}

// TestHistoryQueryValuesRoundTrip: Values gives back the query it came from.
func TestHistoryQueryValuesRoundTrip(t *testing.T) {
	q := HistoryQuery{Filter: store.Filter{From: historyAt.Add(time.Nanosecond), To: historyAt.Add(time.Hour),
		Station: "a+b &c", Measurements: []string{store.MeasurementHour, store.MeasurementAlert}}, Format: "lp"}
	v, err := url.ParseQuery(q.Values().Encode())
	require.NoError(t, err)
	got, err := ParseHistoryQuery(v.Get)
	require.NoError(t, err)
	assert.Equal(t, q, got)
}

// TestHistoryBehindToken: with the status pages' token set, the history
// route wants it too (it holds the same farm data), and FetchHistory sends
// it; without it the client says which setting the gateway wants.
func TestHistoryBehindToken(t *testing.T) {
	_, o := historyFixture(t)
	base := start(t, Options{Gatherer: prometheus.NewRegistry(), History: o.History(), Status: &fixedStatus{}, Token: "s3cret-farm-token"})
	q := HistoryQuery{Filter: store.Filter{From: historyAt, To: historyAt.Add(24 * time.Hour), Measurements: []string{store.MeasurementZone}}, Format: "csv"}

	resp, err := http.Get(base + HistoryPath + "?" + q.Values().Encode())
	require.NoError(t, err)
	resp.Body.Close()
	assert.Equal(t, http.StatusUnauthorized, resp.StatusCode)

	var out bytes.Buffer
	_, err = FetchHistory(context.Background(), base, q, "", &out)
	require.Error(t, err)
	assert.False(t, errors.Is(err, ErrNoGateway), "a gateway that wants a token is not absent: no fallback to the locked file")
	assert.Contains(t, err.Error(), "http.token_file")
	assert.Empty(t, out.String())

	n, err := FetchHistory(context.Background(), base, q, "s3cret-farm-token", &out)
	require.NoError(t, err)
	assert.Equal(t, 1, n)
}
