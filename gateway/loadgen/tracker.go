package loadgen

import (
	"context"
	"math"
	"sync"
	"time"

	"etpulse/gateway"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/pipeline"
	"etpulse/hourly"
)

// entry is one published message waiting for the gateway's acknowledgement.
type entry struct {
	at      time.Duration // publication, since the tracker's base
	tick    int
	pub     int
	station int
	closes  int64 // end (Unix seconds) of the station's hour this reading closes; 0 for none
}

// fifo holds the unacknowledged messages of one topic in publication order.
// One topic is published by one connection and the gateway takes messages
// in the order the broker delivers them, so acknowledgements of a topic come
// in the same order.
type fifo struct {
	items []entry
	head  int
}

func (q *fifo) push(e entry) { q.items = append(q.items, e) }

func (q *fifo) pop() (entry, bool) {
	if q.head == len(q.items) {
		return entry{}, false
	}
	e := q.items[q.head]
	q.head++
	if q.head == len(q.items) {
		q.items, q.head = q.items[:0], 0
	} else if q.head > 4096 && q.head*2 > len(q.items) {
		q.items = append(q.items[:0], q.items[q.head:]...)
		q.head = 0
	}
	return e, true
}

// pubState is the progress of one publishing connection.
type pubState struct {
	lastTick    int // last tick fully handed to the connection; -1 before the first
	ackedTick   int // tick of the latest message the gateway acknowledged; -1 before
	outstanding int // published, not yet acknowledged by the gateway
}

// tracker pairs each gateway acknowledgement with its publication, keeps the
// latency histograms, and holds publishers back so that they stay within a
// window of the gateway (see waitTurn).
type tracker struct {
	base  time.Time
	clock func() time.Duration // since base; replaced in tests
	farm  *farm
	lag   int // ticks a publisher may run ahead of the slowest acknowledged tick
	limit int // messages published and not yet acknowledged, all connections

	mu          sync.Mutex
	cond        *sync.Cond
	stopped     bool
	topics      map[string]*fifo
	pubs        []pubState
	outstanding int
	acked       int64
	unmatched   int64 // acknowledgements with no publication on record (redeliveries)
	lastAck     time.Duration
	ackLat      histogram
	recLat      histogram
	closedAt    map[closeKey]time.Duration // gateway's acknowledgement of the reading that closes a station's hour
	spans       map[int64]*hourSpan        // by hour end: closing readings taken to records published, all stations
	hours       []int                      // first emissions, by station
	revisions   int
	incomplete  int
	silenced    int
}

// hourSpan is one hour end across all stations: the last station's closing
// reading acknowledged by the gateway, the last record published and how
// many stations' records.
type hourSpan struct {
	lastClose, lastRecord time.Duration
	records               int
}

type closeKey struct {
	station int
	end     int64
}

func newTracker(f *farm, pubs, lag, limit int) *tracker {
	t := &tracker{base: time.Now(), farm: f, lag: lag, limit: limit, topics: map[string]*fifo{},
		pubs: make([]pubState, pubs), closedAt: map[closeKey]time.Duration{}, spans: map[int64]*hourSpan{}, hours: make([]int, len(f.stations))}
	t.cond = sync.NewCond(&t.mu)
	t.clock = func() time.Duration { return time.Since(t.base) }
	for _, st := range f.stations {
		for _, topic := range st.topics {
			t.topics[topic] = &fifo{}
		}
	}
	for i := range t.pubs {
		t.pubs[i] = pubState{lastTick: -1, ackedTick: -1}
	}
	return t
}

func (t *tracker) since() time.Duration { return t.clock() }

// stop wakes every waiting publisher for good.
func (t *tracker) stop() {
	t.mu.Lock()
	t.stopped = true
	t.mu.Unlock()
	t.cond.Broadcast()
}

// progress is the latest tick the gateway has taken from every connection:
// a connection with nothing outstanding has been taken up to its last tick,
// otherwise up to the tick before its latest acknowledged one. t.mu held.
func (t *tracker) progress() int {
	p := math.MaxInt
	for _, s := range t.pubs {
		v := s.lastTick
		if s.outstanding > 0 {
			v = s.ackedTick - 1
		}
		p = min(p, v)
	}
	return p
}

// waitTurn blocks publisher pub before tick k until the gateway has taken
// every connection's messages up to tick k-lag and fewer than limit-n
// messages are outstanding. The lag keeps the gateway clock (set to the
// newest tick published) within a few simulated minutes of every station's
// readings, so no hour is closed by silence and no silence alert fires;
// the limit bounds the broker's queue. It returns false once stopped.
func (t *tracker) waitTurn(ctx context.Context, pub, k, n int) bool {
	t.mu.Lock()
	defer t.mu.Unlock()
	for !t.stopped && ctx.Err() == nil {
		if t.progress() >= k-t.lag && (t.outstanding == 0 || t.outstanding+n <= t.limit) {
			return true
		}
		t.cond.Wait()
	}
	return false
}

// publishing records that message m is about to be handed to the broker by
// publisher pub at tick k. The entry goes in before the publication, so the
// acknowledgement can never overtake it.
func (t *tracker) publishing(pub, k int, m outMsg) {
	at := t.since()
	t.mu.Lock()
	defer t.mu.Unlock()
	t.topics[m.topic].push(entry{at: at, tick: k, pub: pub, station: m.station, closes: m.closes})
	t.pubs[pub].outstanding++
	t.outstanding++
}

// tickDone records that publisher pub has handed every message of tick k to
// its connection.
func (t *tracker) tickDone(pub, k int) {
	t.mu.Lock()
	t.pubs[pub].lastTick = k
	t.mu.Unlock()
	t.cond.Broadcast()
}

// ack is called when the gateway acknowledges a message of topic.
func (t *tracker) ack(topic string) {
	now := t.since()
	t.mu.Lock()
	q := t.topics[topic]
	if q == nil {
		t.unmatched++
		t.mu.Unlock()
		return
	}
	e, ok := q.pop()
	if !ok {
		t.unmatched++
		t.mu.Unlock()
		return
	}
	t.acked++
	t.lastAck = now
	if e.closes != 0 {
		t.closeTaken(closeKey{e.station, e.closes}, now)
	}
	t.ackLat.add(now - e.at)
	ps := &t.pubs[e.pub]
	ps.outstanding--
	ps.ackedTick = max(ps.ackedTick, e.tick)
	t.outstanding--
	t.mu.Unlock()
	t.cond.Broadcast()
}

// record is gateway.Deps.OnRecord: it counts hours and measures how long a
// first emission took from the publication of the reading that closed it.
func (t *tracker) record(rec hourly.Record) {
	now := t.since()
	t.mu.Lock()
	defer t.mu.Unlock()
	st, ok := t.farm.byID[rec.Station]
	if !ok {
		return
	}
	for _, f := range rec.Flags {
		if f == pipeline.FlagSilenceClose {
			t.silenced++
		}
	}
	if !rec.Complete {
		t.incomplete++
	}
	if rec.Revision > 0 {
		t.revisions++
		return
	}
	t.hours[st]++
	key := closeKey{st, rec.End.Unix()}
	// A record may go out before its closing reading's acknowledgement
	// (that follows the commit): no delay.
	var lat time.Duration
	if at, ok := t.closedAt[key]; ok {
		lat = now - at
	}
	t.recLat.add(lat)
	sp := t.span(key.end)
	sp.lastRecord = max(sp.lastRecord, now)
	sp.records++
}

// tap is the gateway's broker connection with every acknowledgement
// reported to the tracker.
type tap struct {
	inner gateway.Broker
	t     *tracker
}

var _ gateway.Broker = (*tap)(nil)

// Publish forwards to the connection.
func (b *tap) Publish(ctx context.Context, topic string, qos byte, retained bool, payload []byte) error {
	return b.inner.Publish(ctx, topic, qos, retained, payload)
}

// Subscribe forwards to the connection, wrapping each message's Ack.
func (b *tap) Subscribe(filter string, qos byte, handle func(mqtt.Message)) error {
	return b.inner.Subscribe(filter, qos, func(m mqtt.Message) {
		if ack := m.Ack; ack != nil {
			topic := m.Topic
			m.Ack = func() {
				ack()
				b.t.ack(topic)
			}
		}
		handle(m)
	})
}

// closeTaken records the gateway's first acknowledgement of a reading that
// closes a station's hour: the moment the hour closed. t.mu held.
func (t *tracker) closeTaken(key closeKey, now time.Duration) {
	if _, seen := t.closedAt[key]; seen {
		return
	}
	t.closedAt[key] = now
	sp := t.span(key.end)
	sp.lastClose = max(sp.lastClose, now)
}

func (t *tracker) span(end int64) *hourSpan {
	sp := t.spans[end]
	if sp == nil {
		sp = &hourSpan{}
		t.spans[end] = sp
	}
	return sp
}

// hourCloses returns, over the hour ends every station has closed, how
// many there are and the median and largest time from the gateway taking
// the last station's closing reading to the last record's publication (0
// when the records went out first). t.mu held.
func (t *tracker) hourCloses() (n int, p50, worst time.Duration) {
	var h histogram
	for _, sp := range t.spans {
		if sp.records < len(t.farm.stations) {
			continue
		}
		h.add(max(0, sp.lastRecord-sp.lastClose))
		n++
	}
	return n, h.quantile(0.5), h.max
}

// histogram keeps durations in logarithmic buckets 2 % wide from 1 µs, so a
// quantile is read within about 2 % whatever the run length.
type histogram struct {
	counts []int64
	n      int64
	max    time.Duration
}

const histGrowth = 1.02

func (h *histogram) add(d time.Duration) {
	if d < time.Microsecond {
		d = time.Microsecond
	}
	i := int(math.Log(float64(d)/float64(time.Microsecond)) / math.Log(histGrowth))
	if i >= len(h.counts) {
		h.counts = append(h.counts, make([]int64, i+1-len(h.counts))...)
	}
	h.counts[i]++
	h.n++
	h.max = max(h.max, d)
}

// quantile returns the upper edge of the bucket holding quantile q (0-1),
// capped at the largest value seen; 0 when empty.
func (h *histogram) quantile(q float64) time.Duration {
	if h.n == 0 {
		return 0
	}
	rank := int64(math.Ceil(q * float64(h.n)))
	rank = max(rank, 1)
	var seen int64
	for i, c := range h.counts {
		seen += c
		if seen >= rank {
			edge := time.Duration(float64(time.Microsecond) * math.Pow(histGrowth, float64(i+1)))
			return min(edge, h.max)
		}
	}
	return h.max
}
