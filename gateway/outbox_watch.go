package gateway

import (
	"context"
	"fmt"
	"log/slog"
	"time"

	"etpulse/gateway/alert"
	"etpulse/gateway/clock"
	"etpulse/gateway/quality"
	"etpulse/gateway/store"
)

// outboxCheckEvery is how often the outbox watch looks at the outbox depth.
const outboxCheckEvery = time.Minute

// outboxWatch raises an outbox-near-cap alert for every site while the store
// outbox holds more than its near-cap share (the store is unreachable or
// too slow, and raw summaries are about to be dropped), and clears it once
// the outbox has drained below that share.
type outboxWatch struct {
	outbox *store.Outbox
	alerts *quality.Monitor
	sites  []string
	clock  clock.Clock
	log    *slog.Logger

	// cleared: the alert is known to be inactive for every site, so a
	// check below the near-cap share writes nothing. False at start, so an
	// alert left active by an earlier run is cleared by the first check.
	cleared bool
}

var (
	_ Service       = (*outboxWatch)(nil)
	_ clock.Stepper = (*outboxWatch)(nil)
)

// Run checks the outbox once a minute until ctx ends.
func (w *outboxWatch) Run(ctx context.Context) error {
	return clock.Loop(ctx, w.clock, nil, w)
}

// RunOnce checks the outbox at now (a failed check is logged and retried at
// the next pass) and asks for the next check a minute later.
func (w *outboxWatch) RunOnce(_ context.Context, now time.Time) (time.Time, error) {
	if err := w.check(now); err != nil {
		w.log.Error("checking the outbox for its alert", "err", err)
	}
	return now.Add(outboxCheckEvery), nil
}

// check raises or clears the alert from the outbox's state at now. Raising an
// active alert updates its evidence; clearing an inactive one does nothing.
func (w *outboxWatch) check(now time.Time) error {
	depth, oldest := w.outbox.Stats()
	capacity := w.outbox.Cap()
	near := w.outbox.NearCap()
	if !near && w.cleared {
		return nil
	}
	for _, site := range w.sites {
		key := alert.OutboxKey(site)
		var err error
		if near {
			err = w.alerts.Raise(nil, alert.Alert{
				Key: key, Severity: alert.SeverityWarning, Since: now,
				Value: float64(depth), Limit: float64(capacity),
				Message: fmt.Sprintf("store outbox holds %d points of its cap %d, the oldest waiting %s: is the store reachable?",
					depth, capacity, oldest.Round(time.Second)),
			})
		} else {
			err = w.alerts.Clear(nil, key, now, fmt.Sprintf("store outbox down to %d points of its cap %d", depth, capacity))
		}
		if err != nil {
			return fmt.Errorf("outbox alert for site %s: %w", site, err)
		}
	}
	w.cleared = !near
	return nil
}
