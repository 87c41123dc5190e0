package pipeline

import (
	"container/heap"
	"slices"
	"time"
)

// The pipeline's clock pass (Tick) visits only the stations that have
// something due. Each station's deadlines are kept in memory and indexed:
//
//   - wake: the earliest of its open hour's silence deadline, its revision
//     deadline (close_grace after the latest late reading of a closed hour)
//     and the time its earliest held reading comes within max_future; this
//     is what NextDeadline reports and what wakes the gateway;
//   - prune: when its oldest stored sample or hour state leaves the late
//     window (or the 25 hours the solar fill needs);
//   - soon: work due at the next pass whatever the time (revisions a crash
//     left, a prune after an hour closed, an hour its readings made due that
//     could not be closed).
//
// The index is updated wherever a station's cursor, watermark, arrival,
// late or held marks change (schedule), so a pass costs O(due stations ·
// log stations), not a visit and a read transaction per station.

// dueHeap is a min-heap of stations by one of their deadlines.
type dueHeap struct {
	sts []*station
	key func(*station) time.Time
	pos func(*station) *int
}

func (h *dueHeap) Len() int           { return len(h.sts) }
func (h *dueHeap) Less(i, j int) bool { return h.key(h.sts[i]).Before(h.key(h.sts[j])) }
func (h *dueHeap) Swap(i, j int) {
	h.sts[i], h.sts[j] = h.sts[j], h.sts[i]
	*h.pos(h.sts[i]), *h.pos(h.sts[j]) = i, j
}

// Push and Pop are for container/heap only.
func (h *dueHeap) Push(x any) {
	st := x.(*station)
	*h.pos(st) = len(h.sts)
	h.sts = append(h.sts, st)
}

func (h *dueHeap) Pop() any {
	st := h.sts[len(h.sts)-1]
	h.sts = h.sts[:len(h.sts)-1]
	*h.pos(st) = -1
	return st
}

// set puts st in the heap under its current key, or takes it out when the
// key is zero.
func (h *dueHeap) set(st *station) {
	p := *h.pos(st)
	switch {
	case h.key(st).IsZero():
		if p >= 0 {
			heap.Remove(h, p)
		}
	case p >= 0:
		heap.Fix(h, p)
	default:
		heap.Push(h, st)
	}
}

// popDue appends to out every station whose key is at or before now,
// removing it from the heap.
func (h *dueHeap) popDue(now time.Time, out []*station) []*station {
	for len(h.sts) > 0 && !h.key(h.sts[0]).After(now) {
		out = append(out, heap.Pop(h).(*station))
	}
	return out
}

// peek returns the earliest key, or the zero time.
func (h *dueHeap) peek() time.Time {
	if len(h.sts) == 0 {
		return time.Time{}
	}
	return h.key(h.sts[0])
}

// deadlines is the pipeline's index of station deadlines.
type deadlines struct {
	wake, prune dueHeap
	soon        []*station
}

func newDeadlines() *deadlines {
	return &deadlines{
		wake:  dueHeap{key: func(st *station) time.Time { return st.wakeAt }, pos: func(st *station) *int { return &st.wakePos }},
		prune: dueHeap{key: func(st *station) time.Time { return st.pruneAt }, pos: func(st *station) *int { return &st.prunePos }},
	}
}

// nextWake computes the station's wake deadline (zero: none); see deadlines.
func (st *station) nextWake() time.Time {
	var next time.Time
	add := func(d time.Time) {
		if !d.IsZero() && (next.IsZero() || d.Before(next)) {
			next = d
		}
	}
	if st.hasCursor {
		add(st.silenceDeadline(st.cursor.Add(time.Hour)))
	}
	if st.dirty {
		add(st.reviseAt)
	}
	if st.held > 0 && !st.heldFirst.IsZero() {
		add(st.heldFirst.Add(-st.cfg.MaxFuture.D()))
	}
	return next
}

// dueNow reports work due at the next pass whatever the time.
func (st *station) dueNow() bool {
	return (st.dirty && st.reviseAt.IsZero()) ||
		(st.held > 0 && st.heldFirst.IsZero()) ||
		st.pruneSoon ||
		(st.hasCursor && !st.watermark.Before(st.cursor.Add(time.Hour+st.cfg.CloseGrace.D())))
}

// schedule re-indexes the station after its marks changed. p.mu must be held.
func (p *Pipeline) schedule(st *station) {
	st.wakeAt = st.nextWake()
	p.due.wake.set(st)
	p.due.prune.set(st)
	if !st.soon && st.dueNow() {
		st.soon = true
		p.due.soon = append(p.due.soon, st)
	}
}

// takeDue removes from the index and returns, in configuration order, the
// stations with something due at now. The caller schedules them again.
func (p *Pipeline) takeDue(now time.Time) []*station {
	out := p.due.wake.popDue(now, nil)
	out = p.due.prune.popDue(now, out)
	for _, st := range p.due.soon {
		st.soon = false
	}
	out = append(out, p.due.soon...)
	p.due.soon = p.due.soon[:0]
	slices.SortFunc(out, func(a, b *station) int { return a.index - b.index })
	return slices.Compact(out)
}

// nextPrune computes when prune next has work, from the oldest stored
// sample and hour state (ok: the bucket has one) after a prune at now. A
// time not after now means the cursor holds them back: the next closed
// hour asks for a prune (station.pruneSoon).
func (st *station) nextPrune(now, firstSample time.Time, hasSample bool, firstHour time.Time, hasHour bool) time.Time {
	var next time.Time
	add := func(d time.Time) {
		if d.After(now) && (next.IsZero() || d.Before(next)) {
			next = d
		}
	}
	lw := st.cfg.LateWindow.D()
	// prune deletes keys strictly before its limits: due 1 ns after.
	if hasSample {
		add(firstSample.Add(lw + time.Hour + 1))
	}
	if hasHour {
		add(firstHour.Add(max(lw, hourStatsKeep) + time.Hour + 1))
	}
	return next
}
