package gateway

import (
	"etpulse/gateway/alert"
	"etpulse/gateway/config"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/store"
	"etpulse/gateway/zones"
)

// wireZones adds the zone balance and command scheduler when the
// configuration has zones and the caller did not supply its own. Its alerts
// (stale ET, valve without report, failed valve) go through alerts.
func wireZones(cfg *config.Config, deps Deps, outbox store.Enqueuer, alerts alert.Raiser, comp *Components) error {
	n := 0
	for i := range cfg.Sites {
		n += len(cfg.Sites[i].Zones)
	}
	if n == 0 {
		return nil
	}
	for _, h := range comp.Handlers {
		if _, ok := h.(*zones.Service); ok {
			return nil
		}
	}
	svc, err := zones.New(zones.Options{
		Config: cfg, DB: deps.DB, MQTT: deps.MQTT, Store: outbox, Alerts: alerts,
		Logger: deps.Logger.With("component", "zones"), Registerer: deps.Registerer,
		Clock: deps.Clock, OnEvent: deps.OnZoneEvent,
	})
	if err != nil {
		return err
	}
	comp.Handlers = append(comp.Handlers, svc)
	comp.Observers = append(comp.Observers, svc) // soil-moisture probe readings
	comp.Services = append(comp.Services, svc)
	return nil
}

var (
	_ pipeline.HourHandler    = (*zones.Service)(nil)
	_ pipeline.HourHandler    = (*zones.Backtest)(nil)
	_ Service                 = (*zones.Service)(nil)
	_ pipeline.SampleObserver = (*zones.Service)(nil)
)
