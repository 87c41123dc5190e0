package gateway

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"syscall"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway/alert"
	"etpulse/gateway/internal/promreg"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/quality"
)

// Retry pauses of a batch held because the state file cannot be written:
// doubling from the first to the cap (common practice, no source).
const (
	pauseFirstRetry = time.Second
	pauseMaxRetry   = 30 * time.Second
)

// stateDiskFault reports whether err, from a write of the state file, is a
// fault of the disk under it that may go away without a restart: full
// (ENOSPC) or over quota (EDQUOT), which an operator fixes by freeing space,
// or failing writes (EIO) or remounted read-only (EROFS), which a restart
// would not fix either. Intake holds its batch and retries on these; any
// other error stops the gateway as before. It returns the alert kind.
func stateDiskFault(err error) (alert.Kind, bool) {
	switch {
	case errors.Is(err, syscall.ENOSPC), errors.Is(err, syscall.EDQUOT):
		return alert.KindStateDiskFull, true
	case errors.Is(err, syscall.EIO), errors.Is(err, syscall.EROFS):
		return alert.KindStateWriteError, true
	}
	return "", false
}

// intakePause is intake's state while it holds a batch unacknowledged
// because the state file cannot be written: the metric, the readiness
// check, and one alert per site. It is used by the intake goroutine; the
// readiness check reads it from the HTTP server's.
type intakePause struct {
	log    *slog.Logger
	path   string         // the state file, for messages
	sites  []string       // one alert per site
	alerts alert.Raiser   // the alert monitor; set by New after setupAlerts
	pub    mqtt.Publisher // for the alert when the monitor cannot persist it
	prefix string         // alert topic prefix
	paused prometheus.Gauge
	pauses prometheus.Counter

	mu      sync.Mutex
	since   time.Time // zero while intake runs
	kind    alert.Kind
	cause   error
	held    int
	raised  map[string]bool // site -> alert persisted through the monitor
	direct  chan struct{}   // closed when the direct alert publish has ended
	retries int
}

func newIntakePause(log *slog.Logger, reg prometheus.Registerer, path, prefix string, sites []string, pub mqtt.Publisher) (*intakePause, error) {
	p := &intakePause{
		log: log, path: path, sites: sites, pub: pub, prefix: prefix,
		paused: prometheus.NewGauge(prometheus.GaugeOpts{
			Name: "etpulse_intake_paused",
			Help: "1 while intake holds received messages unacknowledged because the state file cannot be written (disk full, quota, I/O error), else 0.",
		}),
		pauses: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "etpulse_intake_pauses_total",
			Help: "Times intake paused because the state file could not be written.",
		}),
	}
	if err := promreg.Register(reg, "intake", p.paused, p.pauses); err != nil {
		return nil, err
	}
	return p, nil
}

// message is the alert's and the readiness check's text. p.mu must be held.
func (p *intakePause) message() string {
	fix := "free space on the state file's disk"
	if p.kind == alert.KindStateWriteError {
		fix = "check the state file's disk (kernel log, remount read-write) or move the state file"
	}
	return fmt.Sprintf("intake paused since %s: state file %s cannot be written: %v; %d messages held unacknowledged (the broker keeps them); %s, intake resumes by itself",
		p.since.UTC().Format(time.RFC3339), p.path, p.cause, p.held, fix)
}

// hold records a failed store of held messages at now (kind and err from
// stateDiskFault) before a wait of retry: the first call pauses (metric,
// log, alert); later ones retry raising the alert through the monitor.
func (p *intakePause) hold(now time.Time, kind alert.Kind, err error, held int, retry time.Duration) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.cause, p.held = err, held
	if p.since.IsZero() {
		p.since, p.kind, p.retries = now, kind, 0
		p.raised = map[string]bool{}
		p.paused.Set(1)
		p.pauses.Inc()
		p.log.Error("state file cannot be written; intake paused, messages held unacknowledged",
			"err", err, "held", held, "retry_in", retry, "fix", p.message())
	} else {
		p.retries++
		p.log.Warn("state file still cannot be written; intake paused", "err", err, "held", held,
			"paused_for", now.Sub(p.since).Round(time.Second), "retries", p.retries, "retry_in", retry)
	}
	p.raiseLocked(now)
}

// raiseLocked raises the alert for every site through the monitor (which
// persists it in the state file, publishes it and stores it). The state
// file may refuse that write too: the first time, the alert is published
// directly, retained, so an operator sees it; the monitor is asked again at
// every retry and at resume.
func (p *intakePause) raiseLocked(now time.Time) {
	var failed []alert.Alert
	for _, site := range p.sites {
		if p.raised[site] || p.alerts == nil {
			continue
		}
		a := p.alertLocked(site, now)
		if err := p.alerts.Raise(nil, a); err != nil {
			failed = append(failed, a)
			continue
		}
		p.raised[site] = true
	}
	if len(failed) == 0 || p.direct != nil || p.pub == nil {
		return
	}
	done := make(chan struct{})
	p.direct = done
	// Not on intake's goroutine: a publish waits for the broker's
	// acknowledgement, which may queue behind the messages intake holds.
	go func() {
		defer close(done)
		for _, a := range failed {
			payload, err := quality.MarshalAlert(a)
			if err == nil {
				ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
				err = p.pub.Publish(ctx, quality.Topic(p.prefix, a.Key), 1, true, payload)
				cancel()
			}
			if err != nil {
				p.log.Error("publishing the state-file alert", "alert", a.Key.String(), "err", err)
			}
		}
	}()
}

func (p *intakePause) alertLocked(site string, now time.Time) alert.Alert {
	return alert.Alert{
		Key: alert.StateKey(site, p.kind), Severity: alert.SeverityCritical,
		Since: now, Updated: now, Value: float64(p.held), Message: p.message(),
	}
}

// resume ends a pause once held messages are stored at now: the alert is
// raised through the monitor if it never was (so the clear replaces a
// directly published alert) and cleared, the metric set to 0.
func (p *intakePause) resume(now time.Time) {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.since.IsZero() {
		return
	}
	if p.direct != nil {
		select {
		case <-p.direct:
		case <-time.After(15 * time.Second):
		}
		p.direct = nil
	}
	p.raiseLocked(now)
	took := now.Sub(p.since).Round(time.Second)
	for _, site := range p.sites {
		if !p.raised[site] || p.alerts == nil {
			continue
		}
		if err := p.alerts.Clear(nil, alert.StateKey(site, p.kind), now,
			fmt.Sprintf("state file writable again after %s; %d held messages stored", took, p.held)); err != nil {
			p.log.Error("clearing the state-file alert", "site", site, "err", err)
		}
	}
	p.log.Info("state file writable again; intake resumed", "paused_for", took, "held", p.held, "retries", p.retries)
	p.since, p.cause, p.raised = time.Time{}, nil, nil
	p.paused.Set(0)
}

// check is the readiness condition: it fails, naming the cause and the
// fix, for as long as intake is paused.
func (p *intakePause) check(context.Context) error {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.since.IsZero() {
		return nil
	}
	return errors.New(p.message())
}
