package gateway

import (
	"context"
	"fmt"
	"slices"
	"sync"

	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway/config"
	"etpulse/gateway/httpapi"
	"etpulse/gateway/quality"
	"etpulse/gateway/store"
)

// setupAlerts builds the drift and fault monitor and the metrics and health
// server, and adds them to comp: the monitor observes every sample, handles
// every closed hour (after the outbox, so its points share the transaction),
// gates the hours of alerted sensors, and runs as a Service that persists,
// publishes and checks for silence; an outbox watch raises outbox-near-cap;
// the HTTP server runs as a Service unless disabled.
func setupAlerts(cfg *config.Config, deps Deps, outbox *store.Outbox, pause *intakePause, comp *Components) (*quality.Monitor, error) {
	mon, err := quality.New(quality.Options{
		Config: cfg, DB: deps.DB, Outbox: outbox, Publisher: deps.MQTT,
		Logger: deps.Logger.With("component", "alerts"), Registerer: deps.Registerer,
		Clock: deps.Clock,
	})
	if err != nil {
		return nil, fmt.Errorf("set up alerts: %w", err)
	}
	if !cfg.Alerts.Disabled {
		comp.Observers = append(comp.Observers, mon)
		comp.Handlers = append(comp.Handlers, mon)
		if comp.Gate == nil {
			comp.Gate = mon
		}
	}
	comp.Services = append(comp.Services, mon)
	if outbox != nil && cfg.Store.URL != "" { // local history only: nothing ever waits
		comp.Services = append(comp.Services, &outboxWatch{
			outbox: outbox, alerts: mon, sites: siteIDs(cfg),
			clock: deps.Clock, log: deps.Logger.With("component", "alerts"),
		})
	}
	if cfg.HTTP.Disabled {
		return mon, nil
	}
	gatherer := deps.Gatherer
	if gatherer == nil {
		if g, ok := deps.Registerer.(prometheus.Gatherer); ok {
			gatherer = g
		} else {
			gatherer = prometheus.DefaultGatherer
		}
	}
	// The intake check first: while intake is paused on an unwritable state
	// file, a small test write may still succeed (freed pages are reused).
	checks := []httpapi.Check{{Name: "intake", Func: pause.check}, httpapi.StateWritable(deps.DB, deps.Clock.Now)}
	if c, ok := deps.MQTT.(interface{ ConnectionState() error }); ok {
		checks = append([]httpapi.Check{httpapi.BrokerState(c.ConnectionState)}, checks...)
	} else if c, ok := deps.MQTT.(interface{ Connected() bool }); ok {
		checks = append([]httpapi.Check{httpapi.BrokerConnected(c.Connected)}, checks...)
	}
	if outbox != nil {
		checks = append(checks, httpapi.OutboxBelowCap(outbox.Stats, outbox.Cap()))
	}
	var history *store.History // served on /api/v1/history for etpulse export
	if outbox != nil {
		history = outbox.History()
	}
	comp.Services = append(comp.Services, httpapi.New(httpapi.Options{
		Addr: cfg.HTTP.Listen, Gatherer: gatherer, Checks: checks, History: history,
		Logger: deps.Logger.With("component", "http"),
	}))
	return mon, nil
}

// siteIDs returns the configured sites' ids, in order.
func siteIDs(cfg *config.Config) []string {
	sites := make([]string, len(cfg.Sites))
	for i := range cfg.Sites {
		sites[i] = cfg.Sites[i].ID
	}
	return sites
}

// Alerts returns the gateway's drift and fault monitor, e.g. to follow its
// events (Monitor.Notify) or to raise alerts from another part (Monitor.Raise).
func (g *Gateway) Alerts() *quality.Monitor { return g.alerts }

// StartHTTP starts the metrics, health and status endpoints now, before
// Run (and before the broker connection exists), so /healthz, /metrics
// and /readyz answer from the first second; Run then leaves the server
// alone. The returned stop shuts the server down and waits for it; call it
// after Run returned (it is safe to call more than once). Without an HTTP
// server (http.disabled) StartHTTP does nothing.
func (g *Gateway) StartHTTP(ctx context.Context) (stop func()) {
	i := slices.IndexFunc(g.comp.Services, func(s Service) bool { _, ok := s.(*httpapi.Server); return ok })
	if i < 0 {
		return func() {}
	}
	srv := g.comp.Services[i].(*httpapi.Server)
	g.comp.Services = slices.Delete(g.comp.Services, i, i+1)
	hctx, cancel := context.WithCancel(context.WithoutCancel(ctx))
	done := make(chan struct{})
	go func() {
		defer close(done)
		if err := srv.Run(hctx); err != nil {
			g.log.Error("metrics and health endpoints stopped", "err", err)
		}
	}()
	var once sync.Once
	return func() { once.Do(func() { cancel(); <-done }) }
}

// resumeReadingChecks gives the alert monitor each sensor's latest reading
// from the state file, so a jump between the last reading before a restart
// and the first after it is checked like any other.
func (g *Gateway) resumeReadingChecks() error {
	if g.alerts == nil || g.cfg.Alerts.Disabled {
		return nil
	}
	for _, st := range g.pipe.Stations() {
		seen, err := g.pipe.LastSeen(st[0], st[1])
		if err != nil {
			return fmt.Errorf("resume reading checks: %w", err)
		}
		for _, s := range seen {
			if s.Value != nil && s.Quantity != "" {
				g.alerts.ResumeReading(st[0], st[1], s.Sensor, s.Quantity, s.Reading, *s.Value)
			}
		}
	}
	return nil
}
