package gateway

import (
	"fmt"
	"os"
	"strings"

	"etpulse/gateway/config"
	"etpulse/gateway/httpapi"
	"etpulse/gateway/status"
	"etpulse/gateway/store"
	"etpulse/gateway/zones"
)

// StatusReader returns the read model behind the status pages and their
// JSON API: the configuration, the local history, the pipeline's last
// readings, the zone service and the alert monitor, on the gateway clock.
// The demo serves it on a listener of its own.
func (g *Gateway) StatusReader() (*status.Reader, error) {
	o := status.Options{
		Config: g.cfg, Now: g.deps.Clock.Now,
		LastSeen: g.LastSeen,
	}
	for _, s := range g.comp.Services {
		if h, ok := s.(*store.History); ok {
			o.History = h
		}
	}
	for _, h := range g.comp.Handlers {
		if z, ok := h.(*zones.Service); ok {
			o.Zones = z
		}
	}
	if g.alerts != nil {
		o.Alerts = g.alerts.Active
	}
	return status.New(o)
}

// attachStatus enables the status pages on the gateway's HTTP server (when
// it is enabled), with the access token of http.token_file.
func (g *Gateway) attachStatus() error {
	var srv *httpapi.Server
	for _, s := range g.comp.Services {
		if h, ok := s.(*httpapi.Server); ok {
			srv = h
		}
	}
	if srv == nil {
		return nil
	}
	token, err := ReadToken(g.cfg.HTTP)
	if err != nil {
		return err
	}
	r, err := g.StatusReader()
	if err != nil {
		return err
	}
	srv.SetStatus(r, token)
	return nil
}

// ReadToken reads the status pages' access token from http.token_file
// ("" when none is configured). Surrounding white space is dropped.
func ReadToken(h config.HTTP) (string, error) {
	if h.TokenFile == "" {
		return "", nil
	}
	b, err := os.ReadFile(h.TokenFile)
	if err != nil {
		return "", fmt.Errorf("http.token_file: %w (write the access token into it, or remove the key to serve the pages without one)", err)
	}
	tok := strings.TrimSpace(string(b))
	if len(tok) < 16 {
		return "", fmt.Errorf("http.token_file: %s holds %d characters, need at least 16 (e.g. the output of 'openssl rand -hex 32')", h.TokenFile, len(tok))
	}
	return tok, nil
}
