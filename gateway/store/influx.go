package store

import (
	"context"
	"errors"
	"fmt"
	"net/http"
	"strconv"
	"time"

	influxdb2 "github.com/influxdata/influxdb-client-go/v2"
	"github.com/influxdata/influxdb-client-go/v2/api"
	http2 "github.com/influxdata/influxdb-client-go/v2/api/http"
)

// InfluxOptions configures an InfluxSink.
type InfluxOptions struct {
	URL    string // base URL of a server with the InfluxDB v2 write API
	Org    string
	Bucket string
	Token  string

	// MaxFuture refuses points further ahead of the clock; 0: DefaultMaxFuture.
	MaxFuture time.Duration
	// MaxAge refuses points older than the server's retention; 0: no limit.
	MaxAge       time.Duration
	WriteTimeout time.Duration    // per request; 0: DefaultWriteTimeout
	Clock        func() time.Time // for the time checks; nil: time.Now
}

// lineWriter sends lines of line protocol; api.WriteAPIBlocking satisfies it.
type lineWriter interface {
	WriteRecord(ctx context.Context, line ...string) error
}

var _ lineWriter = (api.WriteAPIBlocking)(nil)

// InfluxSink writes points as line protocol to a server with the InfluxDB v2
// write API (InfluxDB, victoria-metrics) through influxdb-client-go.
//
// It refuses, without sending them, points the server would accept with 204
// and silently drop (more than MaxFuture ahead, older than MaxAge). When the
// server refuses a batch as invalid (400, 413, 422) it splits the batch in
// halves to find the points at fault and refuses those with the server's
// answer. Any other failure (no connection, timeout, 5xx, 401) is an outage.
type InfluxSink struct {
	opt    InfluxOptions
	client influxdb2.Client
	api    lineWriter
}

var (
	_ Sink     = (*InfluxSink)(nil)
	_ lineSink = (*InfluxSink)(nil)
)

// NewInfluxSink returns a sink writing to the server at opt.URL. It does not
// contact the server.
func NewInfluxSink(opt InfluxOptions) (*InfluxSink, error) {
	if opt.URL == "" {
		return nil, errors.New("new influx sink: no store url (set store.url)")
	}
	setDefault(&opt.MaxFuture, DefaultMaxFuture)
	setDefault(&opt.WriteTimeout, DefaultWriteTimeout)
	if opt.MaxFuture < 0 || opt.MaxAge < 0 {
		return nil, fmt.Errorf("new influx sink: max future and max age must be >= 0, got %s and %s", opt.MaxFuture, opt.MaxAge)
	}
	if opt.Clock == nil {
		opt.Clock = time.Now
	}
	copt := influxdb2.DefaultOptions().
		SetPrecision(time.Nanosecond).
		SetHTTPRequestTimeout(uint(max(opt.WriteTimeout.Seconds(), 1)))
	client := influxdb2.NewClientWithOptions(opt.URL, opt.Token, copt)
	return &InfluxSink{opt: opt, client: client, api: client.WriteAPIBlocking(opt.Org, opt.Bucket)}, nil
}

// Close releases the client's connections.
func (s *InfluxSink) Close() { s.client.Close() }

// Write sends pts; see Sink.
func (s *InfluxSink) Write(ctx context.Context, pts []Point) (int, []Refusal, error) {
	times := make([]time.Time, len(pts))
	lines := make([][]byte, len(pts))
	for i, p := range pts {
		times[i], lines[i] = p.Time, AppendLine(nil, p)
	}
	return s.writeLines(ctx, times, lines)
}

// writeLines is Write for points rendered already: lines[i] is the line of
// the point at times[i].
func (s *InfluxSink) writeLines(ctx context.Context, times []time.Time, lines [][]byte) (int, []Refusal, error) {
	now := s.opt.Clock()
	var early []Refusal
	send := make([]int, 0, len(lines))
	for i, t := range times {
		if err := CheckTime(t, now, s.opt.MaxFuture, s.opt.MaxAge); err != nil {
			early = append(early, Refusal{Index: i, Reason: err.Error()})
			continue
		}
		send = append(send, i)
	}
	n, refused, err := s.send(ctx, lines, send)
	if err == nil {
		return len(lines), mergeRefusals(early, refused), nil
	}
	// Settled: every point before the first unsent one.
	settled := len(lines)
	if n < len(send) {
		settled = send[n]
	}
	early = early[:countBelow(early, settled)]
	return settled, mergeRefusals(early, refused), err
}

// send writes lines[idx...] in one request, halving a batch the server
// refuses as invalid. It returns how many of idx are settled (sent or
// refused, in order) and the refusals among them.
func (s *InfluxSink) send(ctx context.Context, lines [][]byte, idx []int) (int, []Refusal, error) {
	if len(idx) == 0 {
		return 0, nil, nil
	}
	// One body for the request: the client joins the lines it is given
	// into one string, so a single line costs no copy.
	size := len(idx)
	for _, j := range idx {
		size += len(lines[j])
	}
	body := make([]byte, 0, size)
	for i, j := range idx {
		if i > 0 {
			body = append(body, '\n')
		}
		body = append(body, lines[j]...)
	}
	err := s.api.WriteRecord(ctx, string(body))
	if err == nil {
		return len(idx), nil, nil
	}
	var he *http2.Error
	if !errors.As(err, &he) || !refusedAsInvalid(he.StatusCode) {
		return 0, nil, fmt.Errorf("influx write of %d points to %s: %w", len(idx), s.opt.URL, err)
	}
	if len(idx) == 1 {
		reason := "store refused: " + strconv.Itoa(he.StatusCode) + " " + http.StatusText(he.StatusCode) + ": " + he.Error()
		return 1, []Refusal{{Index: idx[0], Reason: reason}}, nil
	}
	half := len(idx) / 2
	n1, r1, err := s.send(ctx, lines, idx[:half])
	if err != nil {
		return n1, r1, err
	}
	n2, r2, err := s.send(ctx, lines, idx[half:])
	return n1 + n2, append(r1, r2...), err
}

// refusedAsInvalid reports whether a status code means the request's content
// is at fault (so retrying it unchanged can never succeed).
func refusedAsInvalid(code int) bool {
	return code == http.StatusBadRequest || code == http.StatusRequestEntityTooLarge || code == http.StatusUnprocessableEntity
}

// countBelow returns how many refusals (in index order) are before index i.
func countBelow(rs []Refusal, i int) int {
	n := 0
	for n < len(rs) && rs[n].Index < i {
		n++
	}
	return n
}

// mergeRefusals merges two lists in index order into one.
func mergeRefusals(a, b []Refusal) []Refusal {
	out := make([]Refusal, 0, len(a)+len(b))
	for len(a) > 0 && len(b) > 0 {
		if a[0].Index < b[0].Index {
			out, a = append(out, a[0]), a[1:]
		} else {
			out, b = append(out, b[0]), b[1:]
		}
	}
	return append(append(out, a...), b...)
}
