package gateway

import (
	"context"
	"time"

	"etpulse/gateway/config"
	"etpulse/gateway/pipeline"
	"etpulse/hourly"
)

// Hour records are published without blocking intake and without waiting
// for one acknowledgement before sending the next: the pending records are
// grouped by station, each station's records go out in order (hour, then
// revision) from their own goroutine, and at most recordWindow publishes
// wait for their acknowledgement at once. A record is in flight from its
// publish until the broker acknowledges it or the publish fails; while in
// flight it is not sent again, however long the acknowledgement takes (the
// MQTT client keeps a QoS 1 message and sends it after a reconnect, so a
// second send would publish the record twice). Acknowledged records are
// marked published in one state transaction per group that completes
// together, not one per record. A record whose publish failed stays pending
// and is retried after recordRetry. At shutdown the publishes still under
// way are abandoned after the drain wait; their records stay pending and go
// out at the next start (the one case where a record may appear twice).

// recordWindow bounds the hour-record publishes awaiting acknowledgement.
const recordWindow = 64

// recordRetry is the wait before failed records are published again.
const recordRetry = 10 * time.Second

// recordKey names one record: a station's hour and revision.
type recordKey struct {
	site, station string
	start         int64
	revision      int
}

func keyOf(r hourly.Record) recordKey {
	return recordKey{r.Site, r.Station, r.Start.UnixNano(), r.Revision}
}

// recordPublisher is the gateway's publishing state.
type recordPublisher struct {
	ctx     context.Context // publishes are bound to it, not to a caller's wait
	window  chan struct{}   // one token per publish awaiting acknowledgement
	failed  chan struct{}   // a publish failed: retry later
	idle    chan struct{}   // a waiter's: closed when nothing is in flight (waitPublished)
	flight  map[recordKey]bool
	acked   []hourly.Record // acknowledged, not yet marked published
	marking bool            // a finish is marking acknowledged records (the marker)
}

// publishPending starts publishing every pending record that is not in
// flight already. It waits only for a place in the window, bounded by ctx;
// false when ctx ended before every record was started.
func (g *Gateway) publishPending(ctx context.Context) bool {
	// Pending is read under the lock: a record leaves flight only after it
	// is marked published, so one not in flight here is truly unpublished.
	g.pubMu.Lock()
	recs, err := g.pipe.Pending()
	if err != nil {
		g.pubMu.Unlock()
		g.log.Error("reading pending records", "err", err)
		return false
	}
	byStation := map[[2]string][]hourly.Record{}
	var order [][2]string
	for _, r := range recs { // oldest hour first, then revision
		k := keyOf(r)
		if g.pub.flight[k] {
			continue
		}
		g.pub.flight[k] = true
		s := [2]string{r.Site, r.Station}
		if byStation[s] == nil {
			order = append(order, s)
		}
		byStation[s] = append(byStation[s], r)
	}
	pubCtx := g.pub.ctx
	g.pubMu.Unlock()
	// The lock is not held while waiting for a place: the publishes that
	// free one take it to finish.
	for i, s := range order {
		select {
		case g.pub.window <- struct{}{}:
		case <-ctx.Done():
			g.pubMu.Lock()
			for _, s := range order[i:] {
				for _, r := range byStation[s] {
					delete(g.pub.flight, keyOf(r))
				}
			}
			g.settleIdle()
			g.pubMu.Unlock()
			return false
		}
		g.pubWG.Add(1)
		go g.publishStation(pubCtx, byStation[s])
	}
	return true
}

// publishStation publishes one station's records in order; it holds one
// place in the window. After a failure the station's later records wait
// for the retry, so they never overtake it.
func (g *Gateway) publishStation(ctx context.Context, recs []hourly.Record) {
	defer g.pubWG.Done()
	defer func() { <-g.pub.window }()
	for i, rec := range recs {
		b, err := pipeline.MarshalRecord(rec)
		if err == nil {
			err = g.deps.MQTT.Publish(ctx, config.RecordTopic(g.cfg.TopicPrefix, rec.Site, rec.Station), 1, false, b)
		}
		if err != nil {
			g.log.Warn("hour record not published; will retry", "station", rec.Station, "hour", rec.LocalStart, "revision", rec.Revision, "err", err)
			g.finish(recs[i:], false)
			select {
			case g.pub.failed <- struct{}{}:
			default:
			}
			return
		}
		g.finish(recs[i:i+1], true)
	}
}

// finish takes failed records out of flight, or hands acknowledged ones to
// the marker. The first finish to find no marker running becomes it: it
// marks everything acknowledged so far published in one transaction, and
// again for what was acknowledged meanwhile, until nothing is left (a group
// commit: one fsync for many acknowledgements). Only the marker reports
// records, one batch after the other, so OnRecord is never called
// concurrently.
func (g *Gateway) finish(recs []hourly.Record, acked bool) {
	g.pubMu.Lock()
	defer g.pubMu.Unlock()
	if !acked {
		for _, r := range recs {
			delete(g.pub.flight, keyOf(r))
		}
		g.settleIdle()
		return
	}
	// In flight until marked: Pending still lists them until then.
	g.pub.acked = append(g.pub.acked, recs...)
	if g.pub.marking {
		return
	}
	g.pub.marking = true
	for len(g.pub.acked) > 0 {
		done := g.pub.acked
		g.pub.acked = nil
		g.pubMu.Unlock()
		g.markPublished(done)
		g.pubMu.Lock()
		for _, r := range done {
			delete(g.pub.flight, keyOf(r))
		}
	}
	g.pub.marking = false
	g.settleIdle()
}

// busy reports records in flight or acknowledged but not yet reported.
// g.pubMu must be held.
func (g *Gateway) busy() bool {
	return len(g.pub.flight) > 0 || len(g.pub.acked) > 0 || g.pub.marking
}

// settleIdle wakes the waiters of waitPublished once nothing is busy.
// g.pubMu must be held.
func (g *Gateway) settleIdle() {
	if !g.busy() && g.pub.idle != nil {
		close(g.pub.idle)
		g.pub.idle = nil
	}
}

// markPublished marks acknowledged records published in one transaction,
// then reports them (retained state, OnRecord, the Published count).
func (g *Gateway) markPublished(done []hourly.Record) {
	if err := g.pipe.MarkPublished(done...); err != nil {
		g.log.Error("marking records published", "err", err)
	}
	for _, rec := range done {
		g.retained.noteRecord(rec)
		if g.deps.OnRecord != nil {
			g.deps.OnRecord(rec)
		}
	}
	g.published.Add(uint64(len(done)))
	g.progressed()
}

// waitPublished waits until no record is in flight, or ctx ends.
func (g *Gateway) waitPublished(ctx context.Context) {
	g.pubMu.Lock()
	if !g.busy() {
		g.pubMu.Unlock()
		return
	}
	if g.pub.idle == nil {
		g.pub.idle = make(chan struct{})
	}
	idle := g.pub.idle
	g.pubMu.Unlock()
	select {
	case <-idle:
	case <-ctx.Done():
	}
}

// publisher publishes pending records whenever intake commits some, and
// retries failed ones every recordRetry of real time.
func (g *Gateway) publisher(ctx context.Context) {
	var retry <-chan time.Time
	for {
		select {
		case <-ctx.Done():
			return
		case <-g.kick:
		case <-g.pub.failed:
			if retry == nil {
				retry = time.After(recordRetry)
			}
			continue
		case <-retry:
			retry = nil
		}
		g.publishPending(ctx)
	}
}
