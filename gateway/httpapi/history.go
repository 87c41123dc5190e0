package httpapi

import (
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"time"

	"etpulse/gateway/store"
)

// HistoryPath is the route that streams the local history, versioned so a
// later format can live beside this one.
const HistoryPath = "/api/v1/history"

// The trailers of a history response: the number of points written, and
// the error that cut the stream short (absent when it is complete).
const (
	TrailerPoints = "Etpulse-Points"
	TrailerError  = "Etpulse-Error"
)

// historyParams are the query parameters of HistoryPath, in the order the
// error messages list them.
var historyParams = []string{"from", "to", "station", "measurement", "format"}

// HistoryQuery selects the points of a history export and their format. The
// route and `etpulse export` parse it with the same rules.
type HistoryQuery struct {
	Filter store.Filter
	Format string // "csv" or "lp"
}

// ParamError is a bad history query parameter: which one, what is wrong
// with it and how to fix it.
type ParamError struct {
	Param   string // e.g. "from"
	Problem string
}

func (e *ParamError) Error() string { return e.Param + ": " + e.Problem }

// ParseHistoryQuery reads a history query from named values (URL query
// parameters, or command-line flags of the same names); get returns "" for
// a value that was not given. Errors are *ParamError.
func ParseHistoryQuery(get func(param string) string) (HistoryQuery, error) {
	var q HistoryQuery
	var err error
	if q.Filter.From, err = parseQueryTime("from", get("from")); err != nil {
		return q, err
	}
	if q.Filter.To, err = parseQueryTime("to", get("to")); err != nil {
		return q, err
	}
	if !q.Filter.To.After(q.Filter.From) {
		return q, &ParamError{"to", fmt.Sprintf("%s is not after the start %s; give an end later than the start",
			q.Filter.To.Format(time.RFC3339), q.Filter.From.Format(time.RFC3339))}
	}
	q.Filter.Station = get("station")
	if m := get("measurement"); m != "" {
		known := store.Measurements()
		for _, name := range strings.Split(m, ",") {
			if !slices.Contains(known, name) {
				return q, &ParamError{"measurement", fmt.Sprintf("unknown measurement %q; give a comma-separated list of %s", name, strings.Join(known, ", "))}
			}
			q.Filter.Measurements = append(q.Filter.Measurements, name)
		}
	}
	switch q.Format = get("format"); q.Format {
	case "":
		q.Format = "csv"
	case "csv", "lp":
	default:
		return q, &ParamError{"format", fmt.Sprintf("must be csv or lp, got %q", q.Format)}
	}
	return q, nil
}

func parseQueryTime(param, s string) (time.Time, error) {
	if s == "" {
		return time.Time{}, &ParamError{param, "required: give a time such as 2024-07-03 (UTC), 2024-07-03T10:00 (UTC) or RFC 3339"}
	}
	t, err := store.ParseTime(s)
	if err != nil {
		problem := err.Error()
		if strings.Contains(s, " ") {
			// A "+" of a UTC offset arrives as a space when the URL was not encoded.
			problem += "; in a URL write the + of a UTC offset as %2B"
		}
		return time.Time{}, &ParamError{param, problem}
	}
	return t, nil
}

// Values returns q as the URL query parameters that ParseHistoryQuery reads
// back to the same query.
func (q HistoryQuery) Values() url.Values {
	v := url.Values{}
	v.Set("from", q.Filter.From.UTC().Format(time.RFC3339Nano))
	v.Set("to", q.Filter.To.UTC().Format(time.RFC3339Nano))
	if q.Filter.Station != "" {
		v.Set("station", q.Filter.Station)
	}
	if len(q.Filter.Measurements) > 0 {
		v.Set("measurement", strings.Join(q.Filter.Measurements, ","))
	}
	v.Set("format", q.Format)
	return v
}

// WriteHistory writes the points of h that q selects to w in q's format
// (store.ExportCSV or store.ExportLineProtocol) and returns how many.
func WriteHistory(w io.Writer, h *store.History, q HistoryQuery) (int, error) {
	if q.Format == "lp" {
		return store.ExportLineProtocol(w, h, q.Filter)
	}
	return store.ExportCSV(w, h, q.Filter)
}

// historyWriteWindow is how long one write of a history response may take:
// a client that stops reading ends the export (and its read transaction)
// after it, however long the whole export runs.
const historyWriteWindow = 30 * time.Second

// history serves HistoryPath: the query is checked first (400 naming the
// parameter), then the points stream from read transactions of the state
// file, which never wait for the gateway's writes. The status is sent before
// the first point, so the outcome travels in the trailers: TrailerPoints on
// success, TrailerError when the export broke off.
func (s *Server) history(w http.ResponseWriter, r *http.Request) {
	if r.Method != http.MethodGet && r.Method != http.MethodHead {
		w.Header().Set("Allow", "GET, HEAD")
		http.Error(w, "method "+r.Method+" not allowed; the history is read with GET", http.StatusMethodNotAllowed)
		return
	}
	if st := s.status.Load(); st != nil && !s.authorized(w, r, st) {
		return // the status pages' token guards the history too
	}
	if s.opt.History == nil {
		http.Error(w, "this gateway keeps no local history", http.StatusServiceUnavailable)
		return
	}
	vals := r.URL.Query()
	for k, v := range vals {
		if !slices.Contains(historyParams, k) {
			http.Error(w, fmt.Sprintf("bad query: unknown parameter %q; known: %s", k, strings.Join(historyParams, ", ")), http.StatusBadRequest)
			return
		}
		if len(v) > 1 {
			http.Error(w, fmt.Sprintf("bad query: %s given %d times; give it once (measurement takes a comma-separated list)", k, len(v)), http.StatusBadRequest)
			return
		}
	}
	q, err := ParseHistoryQuery(vals.Get)
	if err != nil {
		http.Error(w, "bad query: "+err.Error(), http.StatusBadRequest)
		return
	}
	h := w.Header()
	if q.Format == "lp" {
		h.Set("Content-Type", "text/plain; charset=utf-8")
	} else {
		h.Set("Content-Type", "text/csv; charset=utf-8")
	}
	h.Set("X-Content-Type-Options", "nosniff")
	h.Set("Trailer", TrailerPoints+", "+TrailerError)
	w.WriteHeader(http.StatusOK)
	rc := http.NewResponseController(w)
	// The first points of a CSV export follow a pass over the whole range:
	// send the status now, so the client knows the gateway took the query.
	if err := rc.Flush(); err != nil {
		s.log.Warn("history export: flush", "err", err)
		return
	}
	n, err := WriteHistory(&deadlineWriter{w: w, rc: rc}, s.opt.History, q)
	if err != nil {
		s.log.Warn("history export broke off", "points", n, "err", err)
		h.Set(TrailerError, strings.ReplaceAll(err.Error(), "\n", " "))
		return
	}
	h.Set(TrailerPoints, strconv.Itoa(n))
}

// deadlineWriter moves the connection's write deadline forward before each
// write, so the server's WriteTimeout bounds a stalled client, not the
// length of an export.
type deadlineWriter struct {
	w  io.Writer
	rc *http.ResponseController
}

func (d *deadlineWriter) Write(p []byte) (int, error) {
	if err := d.rc.SetWriteDeadline(time.Now().Add(historyWriteWindow)); err != nil && !errors.Is(err, http.ErrNotSupported) {
		return 0, fmt.Errorf("history write deadline: %w", err)
	}
	return d.w.Write(p)
}
