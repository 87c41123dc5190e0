package store

import (
	"fmt"
	"log/slog"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"go.etcd.io/bbolt"

	"etpulse/gateway/config"
)

// Setup builds the store parts of a gateway from its configuration: the
// outbox (an hour handler and the Enqueuer of every other component) and,
// when a server URL is configured, the writer that drains it. w is nil for a
// local-only store. The history's prune loop is o.History().Run.
func Setup(db *bbolt.DB, cfg config.Store, log *slog.Logger, reg prometheus.Registerer, clock func() time.Time) (o *Outbox, w *Writer, err error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	o, err = OpenOutbox(db, OutboxOptions{
		Cap:              cfg.OutboxCap,
		LocalOnly:        cfg.Local(),
		RawSummaries:     cfg.RawSummaries,
		HistoryRetention: cfg.HistoryRetention.D(),
		Logger:           log,
		Registerer:       reg,
		Clock:            clock,
	})
	if err != nil {
		return nil, nil, fmt.Errorf("store setup: %w", err)
	}
	if cfg.Local() {
		log.Info("store: no server configured; local history only", "retention", cfg.HistoryRetention.String())
		return o, nil, nil
	}
	token, err := cfg.Token.Resolve()
	if err != nil {
		return nil, nil, fmt.Errorf("store setup: token: %w", err)
	}
	w, err = NewWriter(o, WriterOptions{
		URL:           cfg.URL,
		Org:           cfg.Org,
		Bucket:        cfg.Bucket,
		Token:         token,
		BatchSize:     cfg.BatchSize,
		FlushInterval: cfg.FlushInterval.D(),
		MaxBackoff:    cfg.MaxBackoff.D(),
		BackfillRate:  cfg.BackfillRate,
		MaxAge:        cfg.ServerRetention.D(),
		Logger:        log,
		Registerer:    reg,
	})
	if err != nil {
		return nil, nil, fmt.Errorf("store setup: %w", err)
	}
	return o, w, nil
}
