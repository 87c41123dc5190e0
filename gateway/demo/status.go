package demo

import (
	"context"
	"fmt"

	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway"
	"etpulse/gateway/httpapi"
)

// statusPages is the demo's status listener.
type statusPages struct {
	url    string
	done   chan struct{} // closed when the server's Run has returned err
	err    error
	cancel context.CancelFunc
}

// serveStatus starts the status pages, metrics and health of the demo's
// gateway on opt.StatusAddr (default a free loopback port). The listener
// is bound before it returns, so its URL can be printed.
func serveStatus(ctx context.Context, g *gateway.Gateway, reg *prometheus.Registry, opt RunOptions) (*statusPages, error) {
	addr := opt.StatusAddr
	if addr == "" {
		addr = "127.0.0.1:0"
	}
	r, err := g.StatusReader()
	if err != nil {
		return nil, fmt.Errorf("status pages: %w", err)
	}
	srv := httpapi.New(httpapi.Options{Addr: addr, Gatherer: reg, Status: r, Logger: opt.Logger.With("component", "http")})
	b, err := g.ReportBuilder()
	if err != nil {
		return nil, fmt.Errorf("status pages: morning report: %w", err)
	}
	srv.SetReport(b)
	if err := srv.Listen(); err != nil {
		return nil, fmt.Errorf("status pages: %w (give a free address with --http)", err)
	}
	sctx, cancel := context.WithCancel(context.WithoutCancel(ctx))
	p := &statusPages{url: "http://" + srv.Addr() + "/", done: make(chan struct{}), cancel: cancel}
	go func() {
		p.err = srv.Run(sctx)
		close(p.done)
	}()
	return p, nil
}

// stop shuts the listener down and waits for it.
func (p *statusPages) stop() {
	p.cancel()
	<-p.done
}
