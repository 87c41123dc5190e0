package gateway

import (
	"etpulse/gateway/httpapi"
	"etpulse/gateway/report"
	"etpulse/gateway/store"
	"etpulse/gateway/zones"
)

// ReportBuilder returns the builder of the morning report over the
// gateway's local history and zone ledger, on the gateway clock.
func (g *Gateway) ReportBuilder() (*report.Builder, error) {
	src := report.Sources{Config: g.cfg, Now: g.deps.Clock.Now}
	for _, s := range g.comp.Services {
		if h, ok := s.(*store.History); ok {
			src.History = h
		}
	}
	for _, h := range g.comp.Handlers {
		if z, ok := h.(*zones.Service); ok {
			src.Zones = z
		}
	}
	return report.New(src)
}

// attachReport enables the morning report's page and JSON route on the
// gateway's HTTP server, when it is enabled.
func (g *Gateway) attachReport() error {
	for _, s := range g.comp.Services {
		if srv, ok := s.(*httpapi.Server); ok {
			b, err := g.ReportBuilder()
			if err != nil {
				return err
			}
			srv.SetReport(b)
		}
	}
	return nil
}
