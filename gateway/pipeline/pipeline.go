package pipeline

import (
	"encoding/binary"
	"errors"
	"fmt"
	"log/slog"
	"slices"
	"strconv"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"go.etcd.io/bbolt"

	"etpulse/gateway/config"
	"etpulse/gateway/ingest"
	"etpulse/hourly"
)

// Reasons the pipeline itself rejects a reading for, besides the ingest
// package's decoding reasons.
const (
	// ReasonUnknownStation: the reading names a station the configuration lacks.
	ReasonUnknownStation ingest.Reason = "unknown_station"
	// ReasonStaleCounter: a cumulative rain counter reading older than the
	// counter value already used; the next reading in order carries its rain.
	ReasonStaleCounter ingest.Reason = "stale_counter"
	// ReasonBadCounter: the counter increment could not be computed.
	ReasonBadCounter ingest.Reason = "bad_counter"
)

// Hargreaves-Samani kRs for interior locations (FAO-56 eq. 50 and its notes:
// 0.16 interior, 0.19 coastal). The pipeline uses the interior value.
const hargreavesKRs = 0.16

// FillHargreaves names the solar fill method written in hourly.Record.Fill.
const FillHargreaves = "hargreaves-samani-rs"

var errNoState = errors.New("no pipeline state yet")

// Options are the pipeline's dependencies.
type Options struct {
	DB         *bbolt.DB
	Logger     *slog.Logger          // nil discards
	Registerer prometheus.Registerer // nil: metrics are kept but not registered
	Handlers   []HourHandler         // called inside each closing transaction, in order
	Observers  []SampleObserver      // called for each accepted sample after commit
	Gate       QualityGate           // optional
	// HeldLimit is how many readings ahead of the gateway clock each
	// station holds at most (0: DefaultHeldLimit).
	HeldLimit int
}

// DefaultHeldLimit is how many readings further ahead of the gateway clock
// than max_future a station holds by default: a day of ten sensors every
// minute and then some. Common practice, no source.
const DefaultHeldLimit = 20000

// Pipeline keeps the durable hour bins of every configured station and closes
// hours into records. Its methods are safe for concurrent use, but Ingest and
// Tick are meant to be driven by one goroutine (the gateway's intake loop, the
// replay command, a test).
type Pipeline struct {
	db        *bbolt.DB
	log       *slog.Logger
	m         *metrics
	rejects   *rejectLog
	handlers  []HourHandler
	observers []SampleObserver
	gate      QualityGate

	heldLimit int

	mu       sync.Mutex // serialises Ingest/Tick and guards the station mirrors
	stations map[stationID]*station
	order    []*station // configuration order, for stable output
	started  bool       // the clock has been read once since New (see startClock)
	due      *deadlines // which stations a clock pass visits (deadline.go)
}

type stationID struct{ site, station string }

// station is one configured station and an in-memory mirror of its cursor
// and watermark (the durable copies live in its meta bucket).
type station struct {
	site, id string
	key      []byte // "<site>/<station>"
	cfg      config.Station
	hs       hourly.Station
	offset   time.Duration // standard-time offset from UTC
	zone     *time.Location

	hasCursor bool
	cursor    time.Time // start of the earliest hour not yet closed
	watermark time.Time // latest reading time accepted
	dirty     bool      // a closed hour may need a revision
	// closed: the station has closed an hour (the closed_through mark is in
	// its meta bucket; pruning never removes it).
	closed bool
	// arrival is the pipeline clock when the station's latest reading was
	// accepted. A station is quiet, and its hour may close by the wall
	// clock, only when nothing has arrived for SilenceClose: a logger
	// uploading a backlog closes its hours by their own clock. After a
	// restart it is the latest persisted arrival of its sensors or the
	// process start (the first clock reading of the pipeline), whichever is
	// later: a station uploading a backlog when the gateway stopped is not
	// taken for a quiet one by the first pass, and a station that was
	// quiet gets SilenceClose after the start to say something.
	arrival time.Time
	// stampedArrival is the pipeline clock when the station's latest reading
	// carrying its own time was accepted (restored like arrival). While it
	// is within SilenceClose, readings stamped by their arrival do not move
	// the station's watermark: its hours close by its own clock.
	stampedArrival time.Time
	// lateAt is the pipeline clock when the latest late reading (for an
	// already closed hour) was accepted; a revision waits until the hour has
	// had no late reading for CloseGrace.
	lateAt    time.Time
	held      int       // readings in the held bucket
	heldFirst time.Time // time of the earliest held reading (zero: none known)

	// The deadline index (deadline.go).
	index     int       // position in configuration order
	reviseAt  time.Time // earliest a dirty hour's revision may be due (zero: at the next pass)
	pruneAt   time.Time // when prune next has work (zero: none known)
	pruneSoon bool      // prune at the next pass
	wakeAt    time.Time // the key in deadlines.wake
	wakePos   int       // position in deadlines.wake, -1 when absent
	prunePos  int       // position in deadlines.prune, -1 when absent
	soon      bool      // in deadlines.soon
}

// silenceDeadline is when the wall clock may close the station's hour that
// ends at end: SilenceClose after the end, and after the latest arrival.
func (st *station) silenceDeadline(end time.Time) time.Time {
	silence := st.cfg.SilenceClose.D()
	d := end.Add(silence)
	if a := st.arrival.Add(silence); a.After(d) {
		d = a
	}
	return d
}

// silent reports whether the wall clock may close the station's hour that
// ends at end. The two conditions are compared separately so that, when
// now and arrival both come from time.Now in this process, the silence is
// measured on the monotonic clock: a step of the wall clock (a fast clock
// set right, or set wrong) is not a silence.
func (st *station) silent(end, now time.Time) bool {
	silence := st.cfg.SilenceClose.D()
	return !now.Before(end.Add(silence)) && now.Sub(st.arrival) >= silence
}

// startClock is called with the pipeline clock by Ingest and Tick: the
// first call after New is the process start (see station.arrival).
func (p *Pipeline) startClock(now time.Time) {
	if p.started {
		return
	}
	p.started = true
	for _, st := range p.order {
		if now.After(st.arrival) {
			st.arrival = now
		}
		if !st.stampedArrival.IsZero() && now.After(st.stampedArrival) {
			st.stampedArrival = now
		}
		p.schedule(st)
	}
}

// New builds a pipeline for every station of cfg and loads their state.
func New(cfg *config.Config, o Options) (*Pipeline, error) {
	if o.DB == nil {
		return nil, errors.New("new pipeline: no state database")
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	m, err := newMetrics(o.Registerer)
	if err != nil {
		return nil, err
	}
	if o.HeldLimit <= 0 {
		o.HeldLimit = DefaultHeldLimit
	}
	p := &Pipeline{
		db: o.DB, log: o.Logger, m: m, rejects: newRejectLog(o.Logger),
		handlers: o.Handlers, observers: o.Observers, gate: o.Gate,
		heldLimit: o.HeldLimit,
		stations:  map[stationID]*station{},
		due:       newDeadlines(),
	}
	for _, site := range cfg.Sites {
		for _, sc := range site.Stations {
			st := newStation(site.ID, sc)
			st.index = len(p.order)
			p.stations[stationID{site.ID, sc.ID}] = st
			p.order = append(p.order, st)
		}
	}
	if err := p.db.Update(func(tx *bbolt.Tx) error {
		if _, err := tx.CreateBucketIfNotExists(bucketPending); err != nil {
			return err
		}
		for _, st := range p.order {
			sb, err := st.buckets(tx)
			if err != nil {
				return err
			}
			st.cursor, st.hasCursor = getTime(sb.meta, keyCursor)
			st.watermark, _ = getTime(sb.meta, keyWatermark)
			_, st.closed = getTime(sb.meta, keyClosedThrough)
			st.dirty = true // look for revisions left pending by a crash
			st.pruneSoon = true
			if err := sb.seen.ForEach(func(k, v []byte) error {
				var ss seenState
				if err := jsonUnmarshal(v, &ss); err != nil {
					return fmt.Errorf("seen %s: %w", k, err)
				}
				if ss.Arrival.After(st.arrival) {
					st.arrival = ss.Arrival
				}
				if ss.Stamped && ss.Arrival.After(st.stampedArrival) {
					st.stampedArrival = ss.Arrival
				}
				return nil
			}); err != nil {
				return err
			}
			st.held = sb.held.Stats().KeyN
			if k, _ := sb.held.Cursor().First(); len(k) >= 8 {
				st.heldFirst = time.Unix(0, int64(binary.BigEndian.Uint64(k[:8]))).UTC()
			}
			p.m.held.WithLabelValues(st.site, st.id).Set(float64(st.held))
			p.schedule(st)
		}
		return nil
	}); err != nil {
		return nil, fmt.Errorf("new pipeline: load state: %w", err)
	}
	return p, nil
}

func newStation(site string, sc config.Station) *station {
	off := time.Duration(sc.UTCOffset * float64(time.Hour))
	name := "UTC" + strconv.FormatFloat(sc.UTCOffset, 'f', -1, 64)
	if sc.UTCOffset >= 0 {
		name = "UTC+" + strconv.FormatFloat(sc.UTCOffset, 'f', -1, 64)
	}
	st := &station{
		site: site, id: sc.ID, key: []byte(site + "/" + sc.ID), cfg: sc,
		hs:      sc.HourlyStation(),
		offset:  off,
		zone:    time.FixedZone(name, int(off/time.Second)),
		wakePos: -1, prunePos: -1,
	}
	return st
}

// hourStart returns the start (UTC) of the standard-time hour holding t.
func (st *station) hourStart(t time.Time) time.Time {
	return t.Add(st.offset).Truncate(time.Hour).Add(-st.offset).UTC()
}

func (st *station) localStart(h time.Time) string {
	return h.In(st.zone).Format("2006-01-02T15:04")
}

// IngestResult summarises one call of Ingest.
type IngestResult struct {
	Accepted   int                // readings stored (including late ones)
	Late       int                // of Accepted, readings for an already closed hour (a revision follows on Tick)
	Duplicates int                // readings already stored (same sensor and timestamp)
	Held       int                // readings ahead of the gateway clock, held until it reaches them
	Rejected   []ingest.Rejection // readings refused, each with its reason
	// Records are the hours the readings' own clock closed during the call
	// (first emissions), in order; they are also pending until MarkPublished.
	Records []hourly.Record
}

// Ingest stores readings durably and closes the hours their clock passes.
// now is the pipeline clock; it decides what is too old or too far in the
// future.
//
// Readings are taken in order. When a reading moves its station's watermark
// past an open hour's end plus the close grace, the readings before it are
// committed, the due hours are closed (one transaction each), and the rest
// follow; so which readings count as late does not depend on how messages
// were batched. When Ingest returns without error every accepted reading is
// on disk and the MQTT messages carrying them may be acknowledged. After an
// error part of the batch may be stored: redelivery is safe, duplicates are
// dropped.
func (p *Pipeline) Ingest(now time.Time, readings []ingest.Reading) (IngestResult, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.startClock(now)
	return p.ingest(now, readings)
}

// ingest is Ingest with p.mu held.
func (p *Pipeline) ingest(now time.Time, readings []ingest.Reading) (IngestResult, error) {
	var res IngestResult
	noStop := map[*station]bool{}
	for len(readings) > 0 {
		rest, stops, err := p.ingestTx(now, readings, noStop, &res)
		if err != nil {
			return res, fmt.Errorf("ingest: %w", err)
		}
		readings = rest
		if len(stops) == 0 {
			continue
		}
		// The stations whose readings made their hours due close them
		// together (closeTogether), then one by one what is left.
		stopped := make([]*station, 0, len(stops))
		for st := range stops {
			stopped = append(stopped, st)
		}
		slices.SortFunc(stopped, func(a, b *station) int { return a.index - b.index })
		from := len(res.Records)
		res.Records = append(res.Records, p.closeTogether(stopped, time.Time{}, stops)...)
		for _, st := range stopped {
			recs, err := p.closeDue(st, stops[st], time.Time{})
			res.Records = append(res.Records, recs...)
			p.schedule(st)
			if err != nil {
				// The hour stays open; Tick retries. Do not stop again for it.
				p.log.Error("closing hour", "station", st.id, "err", err)
				noStop[st] = true
			}
		}
		if len(stopped) > 1 {
			// closeTogether's records come round by round: put them in
			// configuration order, each station's hours in order.
			slices.SortStableFunc(res.Records[from:], func(a, b hourly.Record) int {
				return p.stations[stationID{a.Site, a.Station}].index - p.stations[stationID{b.Site, b.Station}].index
			})
		}
	}
	return res, nil
}

// ingestTx stores readings in one transaction. A reading that would make
// its station's open hour due stops that station: it and the station's
// later readings are returned in rest (in order) for after the close, and
// stops gives the reading's time as the station's watermark for closing;
// other stations' readings go on.
func (p *Pipeline) ingestTx(now time.Time, readings []ingest.Reading, noStop map[*station]bool, res *IngestResult) (rest []ingest.Reading, stops map[*station]time.Time, err error) {
	var (
		acc     []observed
		rejs    []ingest.Rejection
		dups    []*station
		updates = map[*station]*mirror{}
		late    int
		held    int
	)
	err = p.db.Update(func(tx *bbolt.Tx) error {
		rest, stops = nil, nil
		seen := map[*station]map[string]seenState{}
		for _, rd := range readings {
			st := p.stations[stationID{rd.Site, rd.Station}]
			if _, ok := stops[st]; ok && st != nil {
				rest = append(rest, rd) // after its hours close
				continue
			}
			if st == nil {
				rejs = append(rejs, ingest.Rejection{Reason: ReasonUnknownStation, Site: rd.Site, Station: rd.Station, Sensor: rd.Sample.Sensor,
					Err: fmt.Errorf("station %s/%s is not configured", rd.Site, rd.Station)})
				continue
			}
			mu := updates[st]
			if mu == nil {
				mu = &mirror{cursor: st.cursor, hasCursor: st.hasCursor, watermark: st.watermark, stampedArrival: st.stampedArrival}
				updates[st] = mu
			}
			sb, err := st.buckets(tx)
			if err != nil {
				return err
			}
			s := rd.Sample
			s.Time = s.Time.UTC()
			// now is the clock of this call; at is the clock when the
			// reading's message arrived (earlier for one kept in the journal
			// until a checkpoint): every rule about arrival uses at.
			at := now
			if !rd.Arrived.IsZero() {
				at = rd.Arrived
			}
			reject := func(reason ingest.Reason, err error) {
				rejs = append(rejs, ingest.Rejection{Reason: reason, Site: st.site, Station: st.id, Sensor: s.Sensor, Err: err})
			}
			if s.Time.Before(time.Unix(0, 0)) {
				reject(ingest.ReasonTooOld, fmt.Errorf("%s reading time %s is before 1970", s.Quantity, s.Time.Format(time.RFC3339)))
				continue
			}
			if lim := at.Add(st.cfg.MaxFuture.D()); s.Time.After(lim) {
				// The gateway clock may be behind (a box booted before its
				// clock was set): hold the reading until the clock reaches
				// it, up to the holding limit.
				if st.held+mu.held >= p.heldLimit {
					reject(ingest.ReasonTooFuture, fmt.Errorf("%s reading time %s is more than %s ahead of the gateway clock %s and the station already holds %d readings ahead of the clock (the limit): check the gateway's and the station's clocks",
						s.Quantity, s.Time.Format(time.RFC3339), st.cfg.MaxFuture, at.UTC().Format(time.RFC3339), p.heldLimit))
					continue
				}
				fresh, err := putHeld(sb.held, rd, at)
				if err != nil {
					return err
				}
				if fresh {
					mu.held++
					held++
					if st.heldFirst.IsZero() || s.Time.Before(st.heldFirst) {
						st.heldFirst = s.Time
					}
				} else {
					dups = append(dups, st)
				}
				continue
			}
			hour := st.hourStart(s.Time)
			end := hour.Add(time.Hour)
			lw := st.cfg.LateWindow.D()
			// A station that has closed nothing yet keeps at most the late
			// window open, by its own clock: a reading whose hour ended more
			// than the late window before its latest reading does not move
			// its first hour back (a device with an unset clock must not
			// start decades of hours); trimQuiet bounds it by the wall clock.
			if !st.closed && mu.hasCursor && mu.watermark.Sub(end) > lw {
				reject(ingest.ReasonTooOld, fmt.Errorf("%s reading time %s: its hour ended more than the late window of %s before the station's latest reading at %s, and no hour of the station has closed yet; check the device clock",
					s.Quantity, s.Time.Format(time.RFC3339), st.cfg.LateWindow, mu.watermark.Format(time.RFC3339)))
				continue
			}
			// A reading stamped by its arrival drives the station's clock
			// only while no reading with a time of its own has come for
			// SilenceClose: otherwise it would close the hours of a backlog
			// or of a logger that publishes a few minutes late.
			drives := !rd.ArrivalStamped || mu.stampedArrival.IsZero() || at.Sub(mu.stampedArrival) >= st.cfg.SilenceClose.D()
			if drives && !st.closed && mu.hasCursor && s.Time.Sub(mu.cursor.Add(time.Hour)) > lw {
				dropped, err := dropBefore(sb, st, st.hourStart(s.Time.Add(-lw)), lw, "the station's reading at "+s.Time.Format(time.RFC3339))
				if err != nil {
					return err
				}
				rejs = append(rejs, dropped...)
				// The first hour is now the earliest kept reading's, or this
				// one's: no empty hours are closed for the dropped ones.
				mu.cursor = hour
				if k, _ := sb.samples.Cursor().First(); k != nil && hourFromKey(k).Before(hour) {
					mu.cursor = hourFromKey(k)
				}
			}
			isLate := false
			if mu.hasCursor && hour.Before(mu.cursor) {
				var hs hourState
				ok, err := getJSON(sb.hours, hourKey(hour), &hs)
				if err != nil {
					return err
				}
				switch {
				case !ok && !st.closed:
					// Nothing closed yet: move the cursor back.
					mu.cursor = hour
				case !ok || at.Sub(end) > st.cfg.LateWindow.D():
					reject(ingest.ReasonTooOld, fmt.Errorf("%s reading at %s: its hour closed and the late window of %s has passed",
						s.Quantity, s.Time.Format(time.RFC3339), st.cfg.LateWindow))
					continue
				default:
					isLate = true
				}
			}
			key := sampleKey(hour, s)
			if sb.samples.Get(key) != nil {
				dups = append(dups, st)
				continue
			}
			if drives && mu.hasCursor && !noStop[st] && !s.Time.Before(mu.cursor.Add(time.Hour+st.cfg.CloseGrace.D())) {
				// Close the due hours before taking this reading.
				if stops == nil {
					stops = map[*station]time.Time{}
				}
				stops[st] = s.Time
				rest = append(rest, rd)
				continue
			}
			if rd.Counter {
				inc, r, err := counterIncrement(sb.counters, s, rd.Rollover)
				if err != nil {
					return err
				}
				if r != nil {
					r.Site, r.Station = st.site, st.id
					rejs = append(rejs, *r)
					continue
				}
				s.Value = inc
			}
			if err := sb.samples.Put(key, sampleValue(s)); err != nil {
				return fmt.Errorf("store sample: %w", err)
			}
			if isLate {
				var hs hourState
				if _, err := getJSON(sb.hours, hourKey(hour), &hs); err != nil {
					return err
				}
				hs.Dirty, hs.LateAt = true, at.UTC()
				if err := putJSON(sb.hours, hourKey(hour), hs); err != nil {
					return err
				}
				mu.dirty = true
				if at.After(mu.lateAt) {
					mu.lateAt = at
				}
				late++
			}
			if !mu.hasCursor {
				mu.cursor, mu.hasCursor = hour, true
			}
			if drives && s.Time.After(mu.watermark) {
				mu.watermark = s.Time
			}
			if !rd.ArrivalStamped {
				mu.stampedArrival = at
			}
			if seen[st] == nil {
				seen[st] = map[string]seenState{}
			}
			ss := seen[st][s.Sensor]
			ss.Arrival, ss.Stamped = at.UTC(), !rd.ArrivalStamped
			if s.Time.After(ss.Reading) {
				v := s.Value
				ss.Reading, ss.Quantity, ss.Value = s.Time, s.Quantity, &v
			}
			seen[st][s.Sensor] = ss
			acc = append(acc, observed{st, s, at})
		}
		if err := p.commitIngest(tx, updates, seen); err != nil {
			return err
		}
		return p.observe(tx, acc)
	})
	if err != nil {
		p.abortObserved()
		return nil, nil, err
	}
	for st, mu := range updates {
		st.cursor, st.hasCursor, st.watermark = mu.cursor, mu.hasCursor, mu.watermark
		st.dirty = st.dirty || mu.dirty
		if mu.dirty {
			st.lateAt = mu.lateAt
			if at := mu.lateAt.Add(st.cfg.CloseGrace.D()); st.reviseAt.IsZero() || at.Before(st.reviseAt) {
				st.reviseAt = at // revise corrects it to the waiting hours' own
			}
		}
		if !mu.stampedArrival.IsZero() && !st.stampedArrival.Equal(mu.stampedArrival) {
			st.stampedArrival = mu.stampedArrival
		}
		if mu.held > 0 {
			st.held += mu.held
			p.m.held.WithLabelValues(st.site, st.id).Set(float64(st.held))
		}
	}
	for _, a := range acc {
		if a.at.After(a.st.arrival) {
			a.st.arrival = a.at
		}
	}
	for st := range updates {
		p.schedule(st)
	}
	for _, r := range rejs {
		p.m.rejected.WithLabelValues(labels(r.Site, r.Station, string(r.Reason))...).Inc()
		p.rejects.note(now, stationLabel(r.Station), r)
	}
	res.Rejected = append(res.Rejected, rejs...)
	for _, st := range dups {
		p.m.duplicates.WithLabelValues(st.site, st.id).Inc()
	}
	res.Duplicates += len(dups)
	res.Accepted += len(acc)
	res.Late += late
	res.Held += held
	return rest, stops, nil
}

// observed is an accepted sample for the observers.
type observed struct {
	st *station
	s  hourly.Sample
	at time.Time // when its message arrived
}

// observe shows the samples tx stores to the observers, then lets each
// SampleCommitter write what they changed in tx.
func (p *Pipeline) observe(tx *bbolt.Tx, obs []observed) error {
	if len(obs) == 0 {
		return nil
	}
	for _, a := range obs {
		for _, o := range p.observers {
			o.ObserveSample(a.st.site, a.st.id, a.s, a.at)
		}
	}
	for _, o := range p.observers {
		if c, ok := o.(SampleCommitter); ok {
			if err := c.CommitObserved(tx); err != nil {
				return fmt.Errorf("observers: %w", err)
			}
		}
	}
	return nil
}

// abortObserved tells the committers that the transaction observe wrote
// in did not commit.
func (p *Pipeline) abortObserved() {
	for _, o := range p.observers {
		if c, ok := o.(SampleCommitter); ok {
			c.AbortObserved()
		}
	}
}

// mirror is a station's cursor and watermark as a transaction changes them.
type mirror struct {
	cursor         time.Time
	hasCursor      bool
	watermark      time.Time
	dirty          bool
	lateAt         time.Time // the latest arrival of a late reading
	stampedArrival time.Time
	held           int // readings added to the held bucket
}

// commitIngest writes the changed cursors, watermarks and last-seen times.
func (p *Pipeline) commitIngest(tx *bbolt.Tx, updates map[*station]*mirror, seen map[*station]map[string]seenState) error {
	for st, mu := range updates {
		sb, err := st.buckets(tx)
		if err != nil {
			return err
		}
		if mu.hasCursor && (!st.hasCursor || !mu.cursor.Equal(st.cursor)) {
			if err := putTime(sb.meta, keyCursor, mu.cursor); err != nil {
				return err
			}
		}
		if mu.watermark.After(st.watermark) {
			if err := putTime(sb.meta, keyWatermark, mu.watermark); err != nil {
				return err
			}
		}
	}
	for st, m := range seen {
		sb, err := st.buckets(tx)
		if err != nil {
			return err
		}
		for sensor, ss := range m {
			key := []byte(sensor)
			var old seenState
			if _, err := getSeen(sb.seen, key, &old); err != nil {
				return err
			}
			if old.Reading.After(ss.Reading) {
				ss.Reading, ss.Quantity, ss.Value = old.Reading, old.Quantity, old.Value
			}
			if err := putSeen(sb.seen, key, ss); err != nil {
				return err
			}
		}
	}
	return nil
}

// dropBefore deletes the stored readings of a station that has closed
// nothing yet whose hours start before floor (more than the late window lw
// behind ref, which names the time it is measured from), and returns one
// too_old rejection for each.
func dropBefore(sb stationBuckets, st *station, floor time.Time, lw time.Duration, ref string) ([]ingest.Rejection, error) {
	var out []ingest.Rejection
	c := sb.samples.Cursor()
	for k, v := c.First(); k != nil && hourFromKey(k).Before(floor); k, v = c.First() {
		smp, err := decodeSample(k, v)
		if err != nil {
			return nil, err
		}
		out = append(out, ingest.Rejection{Reason: ingest.ReasonTooOld, Site: st.site, Station: st.id, Sensor: smp.Sensor,
			Err: fmt.Errorf("%s reading time %s: more than the late window of %s before %s, and no hour of the station has closed yet: dropped (check the device clock)",
				smp.Quantity, smp.Time.Format(time.RFC3339), lw, ref)})
		if err := c.Delete(); err != nil {
			return nil, fmt.Errorf("drop reading: %w", err)
		}
	}
	return out, nil
}

// heldKey is a held reading's key: its time, then its sensor.
func heldKey(s hourly.Sample) []byte {
	k := make([]byte, 0, 8+len(s.Sensor))
	k = append(k, u64(uint64(s.Time.UnixNano()))...)
	return append(k, s.Sensor...)
}

// putHeld stores a reading ahead of the gateway clock; false when the same
// sensor and time is held already (a redelivery).
func putHeld(b *bbolt.Bucket, rd ingest.Reading, now time.Time) (bool, error) {
	k := heldKey(rd.Sample)
	if b.Get(k) != nil {
		return false, nil
	}
	return true, putJSON(b, k, heldReading{Quantity: rd.Sample.Quantity, Value: rd.Sample.Value, Counter: rd.Counter, Rollover: rd.Rollover, Arrival: now.UTC()})
}

// counterIncrement turns a cumulative counter reading into the rain fallen
// since the previous reading and stores the reading as the new previous one.
// The first reading of a counter only sets the baseline (increment 0).
func counterIncrement(b *bbolt.Bucket, s hourly.Sample, rollover float64) (float64, *ingest.Rejection, error) {
	var prev counterState
	ok, err := getJSON(b, []byte(s.Sensor), &prev)
	if err != nil {
		return 0, nil, err
	}
	if ok && !s.Time.After(prev.Time) {
		return 0, &ingest.Rejection{Reason: ReasonStaleCounter, Sensor: s.Sensor,
			Err: fmt.Errorf("rain counter reading at %s is not after the previous one at %s", s.Time.Format(time.RFC3339), prev.Time.Format(time.RFC3339))}, nil
	}
	inc := 0.0
	if ok {
		inc, err = ingest.CounterIncrement(prev.Value, s.Value, rollover)
		if err != nil {
			return 0, &ingest.Rejection{Reason: ReasonBadCounter, Sensor: s.Sensor, Err: fmt.Errorf("rain counter: %w", err)}, nil
		}
	}
	if err := putJSON(b, []byte(s.Sensor), counterState{Time: s.Time, Value: s.Value}); err != nil {
		return 0, nil, err
	}
	return inc, nil, nil
}
