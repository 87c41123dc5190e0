// Package httpapi serves the gateway's endpoints: /metrics (Prometheus
// text exposition of the given Gatherer), /healthz (the process is alive),
// /readyz (every readiness check passes), /api/v1/history (the local
// history, read beside the running gateway, as `etpulse export` prints it)
// and, once a StatusReader is set, the status pages (/, /stations/...,
// /zones/..., /alerts) with their JSON API under /api/v1/ (behind an
// optional access token). It serves nothing else: no profiling, no
// configuration, no writes. It also holds the client side of the history
// route.
package httpapi

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"strings"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
	"go.etcd.io/bbolt"

	"etpulse/gateway/state"
	"etpulse/gateway/store"
)

// Check is one readiness condition. Func returns nil when ready, or an error
// saying what is wrong (shown in the /readyz body).
type Check struct {
	Name string
	Func func(ctx context.Context) error
}

// Options configure a Server.
type Options struct {
	// Addr is the listen address, e.g. "127.0.0.1:9470"; port 0 picks a free one.
	Addr string
	// Gatherer is scraped on /metrics; nil means prometheus.DefaultGatherer.
	Gatherer prometheus.Gatherer
	// Checks are evaluated on every /readyz request, in order.
	Checks []Check
	// CheckTimeout bounds all checks of one /readyz request; 0 means 5s.
	CheckTimeout time.Duration
	// History is served on HistoryPath; nil answers 503 there.
	History *store.History
	// Logger; nil discards.
	Logger *slog.Logger
	// Status, when set, enables the status pages and their JSON API (see
	// SetStatus); Token, when not empty, is then required on them.
	Status StatusReader
	Token  string
}

// Server is the operational HTTP server; it is a gateway Service.
type Server struct {
	opt   Options
	log   *slog.Logger
	ln    net.Listener
	srv   *http.Server
	ready chan struct{}

	status atomic.Pointer[statusSetup] // nil: no status pages
	report atomic.Pointer[reportSetup] // nil: no morning report (report.go)
}

// New returns a server for opt. It does not listen yet (see Listen and Run).
func New(opt Options) *Server {
	if opt.Gatherer == nil {
		opt.Gatherer = prometheus.DefaultGatherer
	}
	if opt.CheckTimeout <= 0 {
		opt.CheckTimeout = 5 * time.Second
	}
	if opt.Logger == nil {
		opt.Logger = slog.New(slog.DiscardHandler)
	}
	s := &Server{opt: opt, log: opt.Logger, ready: make(chan struct{})}
	if opt.Status != nil {
		s.SetStatus(opt.Status, opt.Token)
	}
	s.srv = &http.Server{
		Handler:           s.Handler(),
		ReadHeaderTimeout: 5 * time.Second,
		ReadTimeout:       10 * time.Second,
		WriteTimeout:      30 * time.Second,
		IdleTimeout:       time.Minute,
		ErrorLog:          slog.NewLogLogger(opt.Logger.Handler(), slog.LevelWarn),
	}
	return s
}

// Handler returns the endpoints' handler (for tests and embedding).
func (s *Server) Handler() http.Handler {
	mux := http.NewServeMux()
	mux.Handle("GET /metrics", promhttp.HandlerFor(s.opt.Gatherer, promhttp.HandlerOpts{
		ErrorLog:      slog.NewLogLogger(s.log.Handler(), slog.LevelError),
		ErrorHandling: promhttp.ContinueOnError,
	}))
	mux.HandleFunc("GET /healthz", func(w http.ResponseWriter, _ *http.Request) {
		w.Header().Set("Content-Type", "text/plain; charset=utf-8")
		fmt.Fprintln(w, "ok")
	})
	mux.HandleFunc("GET /readyz", s.readyz)
	mux.HandleFunc(HistoryPath, s.history)
	s.statusRoutes(mux)
	s.reportRoutes(mux)
	mux.HandleFunc("/", func(w http.ResponseWriter, r *http.Request) {
		http.Error(w, "not found; endpoints: / /stations/{site}/{station} /zones/{site}/{zone} /alerts /api/v1/overview /api/v1/stations/{site}/{station} /api/v1/zones/{site}/{zone} /api/v1/alerts /metrics /healthz /readyz "+HistoryPath, http.StatusNotFound)
	})
	return mux
}

// readyz runs every check and answers 200 with "ready" or 503 with one line
// per failing check.
func (s *Server) readyz(w http.ResponseWriter, r *http.Request) {
	ctx, cancel := context.WithTimeout(r.Context(), s.opt.CheckTimeout)
	defer cancel()
	var failed []string
	for _, c := range s.opt.Checks {
		if err := c.Func(ctx); err != nil {
			failed = append(failed, c.Name+": "+err.Error())
		}
	}
	w.Header().Set("Content-Type", "text/plain; charset=utf-8")
	if len(failed) > 0 {
		w.WriteHeader(http.StatusServiceUnavailable)
		fmt.Fprintln(w, "not ready")
		fmt.Fprintln(w, strings.Join(failed, "\n"))
		return
	}
	fmt.Fprintln(w, "ready")
}

// Listen binds the listen address; Run calls it when it was not called.
func (s *Server) Listen() error {
	if s.ln != nil {
		return nil
	}
	ln, err := net.Listen("tcp", s.opt.Addr)
	if err != nil {
		return fmt.Errorf("http listen %s: %w", s.opt.Addr, err)
	}
	s.ln = ln
	close(s.ready)
	return nil
}

// Addr returns the bound address once Listen has succeeded, else "".
func (s *Server) Addr() string {
	select {
	case <-s.ready:
		return s.ln.Addr().String()
	default:
		return ""
	}
}

// Run serves until ctx is cancelled, then shuts down gracefully. When the
// address cannot be bound (e.g. the previous process still holds it), Run
// logs the error and tries again with a growing pause (up to a minute)
// rather than stopping the gateway: the operational endpoints must never
// take the irrigation schedule down with them.
func (s *Server) Run(ctx context.Context) error {
	for pause := time.Second; ; pause = min(2*pause, time.Minute) {
		err := s.Listen()
		if err == nil {
			break
		}
		s.log.Error("metrics and health endpoints unavailable; retrying", "err", err, "in", pause)
		select {
		case <-ctx.Done():
			return nil
		case <-time.After(pause):
		}
	}
	s.log.Info("metrics and health listening", "addr", s.ln.Addr().String())
	errc := make(chan error, 1)
	go func() { errc <- s.srv.Serve(s.ln) }()
	select {
	case err := <-errc:
		return fmt.Errorf("http serve: %w", err)
	case <-ctx.Done():
	}
	sctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 5*time.Second)
	defer cancel()
	if err := s.srv.Shutdown(sctx); err != nil {
		return fmt.Errorf("http shutdown: %w", err)
	}
	if err := <-errc; err != nil && !errors.Is(err, http.ErrServerClosed) {
		return fmt.Errorf("http serve: %w", err)
	}
	return nil
}

// BrokerConnected is a readiness check that passes while connected()
// reports true (e.g. (*mqtt.Client).Connected).
func BrokerConnected(connected func() bool) Check {
	return Check{Name: "broker", Func: func(context.Context) error {
		if !connected() {
			return errors.New("not connected to the MQTT broker")
		}
		return nil
	}}
}

// BrokerState is a readiness check named "mqtt" that passes while state
// returns nil; otherwise its error says what the connection waits for (e.g.
// "connecting to tcp://...: <last error>; next attempt in 4s").
func BrokerState(state func() error) Check {
	return Check{Name: "mqtt", Func: func(context.Context) error { return state() }}
}

// readyBucket is the bucket the state-file check writes to.
var readyBucket = state.BucketReady

// StateWritable is a readiness check that commits a small write
// transaction to the state file (a full disk or a read-only file fails it).
func StateWritable(db *bbolt.DB, now func() time.Time) Check {
	return Check{Name: "state", Func: func(context.Context) error {
		if db.IsReadOnly() {
			return errors.New("state file opened read-only")
		}
		err := db.Update(func(tx *bbolt.Tx) error {
			b, err := tx.CreateBucketIfNotExists(readyBucket)
			if err != nil {
				return err
			}
			return b.Put([]byte("checked"), []byte(now().UTC().Format(time.RFC3339Nano)))
		})
		if err != nil {
			return fmt.Errorf("state file not writable: %w", err)
		}
		return nil
	}}
}

// OutboxBelowCap is a readiness check that fails when the outbox holds cap
// points or more (stats as (*store.Outbox).Stats).
func OutboxBelowCap(stats func() (depth int, oldest time.Duration), limit int) Check {
	return Check{Name: "outbox", Func: func(context.Context) error {
		depth, oldest := stats()
		if depth >= limit {
			return fmt.Errorf("outbox holds %d points, cap %d (oldest waiting %s)", depth, limit, oldest.Round(time.Second))
		}
		return nil
	}}
}
