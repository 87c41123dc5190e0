package quality

import (
	"bytes"
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"maps"
	"math"
	"slices"
	"strings"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"go.etcd.io/bbolt"

	"etpulse/gateway/alert"
	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
	"etpulse/hourly"
)

// Buckets of the state file owned by the monitor.
var (
	bucketAlerts  = state.BucketAlerts       // Key.String() -> JSON Alert (active, and cleared ones for a while)
	bucketHours   = state.BucketAlertHours   // "site/station" -> hour start (8 bytes, unix s) -> JSON HourObs
	bucketPublish = state.BucketAlertPublish // topic -> retained payload to publish (empty: clear)
)

// Retention rules of the monitor's state (common practice, no source).
const (
	// keepCleared: cleared alerts are kept this long so that a revised hour
	// is gated as it was when first closed.
	keepCleared = 48 * time.Hour
	// keepHours: closed-hour observations kept for the day-scale checks.
	keepHours = (config.MaxAlertWindowDays + 1) * 24 * time.Hour
	// keepAccumulated: readings accumulated per hour for quantities the
	// gate excluded from the record are kept at most this long (see
	// stationInfo.keepAcc for the usual, shorter time).
	keepAccumulated = 30 * time.Hour
	// accMargin is added to the time a late reading may still revise an
	// hour, for the revision's own wait (close grace, a busy gateway).
	accMargin = 2 * time.Hour
	// maxPublishBackoff bounds the wait between failed publish attempts.
	maxPublishBackoff = time.Minute
)

// Options are the monitor's dependencies.
type Options struct {
	Config *config.Config // the whole configuration (stations and alert settings)
	DB     *bbolt.DB      // the state file
	// Outbox receives one ClassAlert point per alert event; nil stores none.
	Outbox store.Enqueuer
	// Publisher publishes the retained alert topics; nil publishes nothing
	// (the pending messages stay in the state file).
	Publisher mqtt.Publisher
	// Logger; nil discards.
	Logger *slog.Logger
	// Registerer for the alert metrics; nil registers none.
	Registerer prometheus.Registerer
	// Clock is the gateway's time and its waits; nil means clock.Real.
	Clock clock.Clock
	// OnEvent, when set, is called with every committed alert event (the
	// demo prints them). It must not block.
	OnEvent func(Event)
}

type stationID struct{ site, station string }

type stationInfo struct {
	cfg      *config.Station
	hs       hourly.Station
	choices  config.StationAlerts
	readings *ReadingChecks
	// acc holds the readings accumulated per hour, oldest first (guarded
	// by Monitor.mu). keepAcc is how long an hour's are kept after the
	// start of the station's latest closed hour: while a late reading may
	// still revise it (late window, max_future, close grace) plus
	// accMargin, at most keepAccumulated. Readings arrive for the latest
	// hours, so a search from the end finds their hour in a step or two.
	acc     []accHour
	keepAcc time.Duration
	nq      int // distinct quantities of the station's channels
}

// accHour is the summary of one station-hour's readings, per quantity: a
// short list (a station has a handful of quantities), not a map.
type accHour struct {
	hour  int64 // hour start, unix seconds
	stats []accStat
}

type accStat struct {
	q hourly.Quantity
	s QStats
}

// accFor returns the station's summary list of hour (unix seconds),
// inserted in order when absent.
func (info *stationInfo) accFor(hour int64) *accHour {
	i := len(info.acc)
	for i > 0 && info.acc[i-1].hour > hour {
		i--
	}
	if i > 0 && info.acc[i-1].hour == hour {
		return &info.acc[i-1]
	}
	info.acc = slices.Insert(info.acc, i, accHour{hour: hour, stats: make([]accStat, 0, max(1, info.nq))})
	return &info.acc[i]
}

// accAt returns the summaries of hour (unix seconds), nil when none.
func (info *stationInfo) accAt(hour int64) []accStat {
	for i := len(info.acc) - 1; i >= 0 && info.acc[i].hour >= hour; i-- {
		if info.acc[i].hour == hour {
			return info.acc[i].stats
		}
	}
	return nil
}

// Monitor runs the checks, keeps alert state in the state file, publishes
// alerts on MQTT (retained), writes them to the store through the outbox,
// counts them in metrics, and answers the pipeline's quality gate.
//
// It implements pipeline.SampleObserver, pipeline.HourHandler and
// pipeline.QualityGate, and is a gateway Service (Run) that persists
// reading-level events, checks for silent sensors and publishes.
type Monitor struct {
	cfg      *config.Config
	alerts   *config.Alerts
	db       *bbolt.DB
	outbox   store.Enqueuer
	pub      mqtt.Publisher
	log      *slog.Logger
	clock    clock.Clock
	backoff  time.Duration // publish retry backoff; owned by RunOnce's caller
	lmu      sync.Mutex
	onEvent  []func(Event)
	metrics  *metrics
	notify   chan struct{}
	stations map[stationID]*stationInfo

	// winMu guards the windows of closed hours (hour-level checks).
	winMu   sync.Mutex
	windows map[stationID][]HourObs // as committed
	txOf    *bbolt.Tx               // the write transaction txWin belongs to (not its ID: a rolled-back ID is reused)
	txWin   map[stationID][]HourObs // changed in transaction txID, not yet committed

	// syncMu orders the persisting of reading-level events: held by Sync
	// from taking pending until its transaction ends, and by
	// CommitObserved until the pipeline's transaction ends, so events of
	// one key are written in the order they happened.
	syncMu  sync.Mutex
	inTx    []Event // taken by CommitObserved, written in the pipeline's open transaction
	holding bool    // CommitObserved holds syncMu (the pipeline's goroutine only)

	mu      sync.Mutex
	state   map[alert.Key]alert.Alert // committed state: active alerts and recently cleared ones
	pending []Event                   // reading-level events not yet persisted
	next    time.Time                 // earliest silence deadline
	scratch []Finding                 // ObserveSample's findings, reused from reading to reading
}

var (
	_ pipeline.SampleCommitter = (*Monitor)(nil)
	_ pipeline.SampleObserver  = (*Monitor)(nil)
	_ pipeline.HourHandler     = (*Monitor)(nil)
	_ pipeline.QualityGate     = (*Monitor)(nil)
)

// New opens the monitor's buckets, loads the alert state and registers the
// metrics. Every configured sensor is expected to report from now on.
func New(o Options) (*Monitor, error) {
	if o.Config == nil || o.DB == nil {
		return nil, errors.New("new alert monitor: config and state database are required")
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	o.Clock = clock.Or(o.Clock)
	m := &Monitor{
		cfg: o.Config, alerts: &o.Config.Alerts, db: o.DB, outbox: o.Outbox, pub: o.Publisher,
		log: o.Logger, clock: o.Clock,
		notify:   make(chan struct{}, 1),
		stations: map[stationID]*stationInfo{},
		state:    map[alert.Key]alert.Alert{},
		windows:  map[stationID][]HourObs{},
		txWin:    map[stationID][]HourObs{},
	}
	if o.OnEvent != nil {
		m.onEvent = append(m.onEvent, o.OnEvent)
	}
	var err error
	if m.metrics, err = newMetrics(o.Registerer); err != nil {
		return nil, fmt.Errorf("new alert monitor: %w", err)
	}
	now := m.clock.Now()
	for i := range o.Config.Sites {
		site := &o.Config.Sites[i]
		for j := range site.Stations {
			sc := &site.Stations[j]
			info := &stationInfo{
				cfg: sc, hs: sc.HourlyStation(),
				choices:  m.alerts.StationChoices(site.ID, sc.ID),
				readings: NewReadingChecks(site.ID, sc.ID, m.alerts),
				keepAcc:  min(keepAccumulated, sc.LateWindow.D()+sc.MaxFuture.D()+sc.CloseGrace.D()+accMargin),
			}
			quantities := map[hourly.Quantity]bool{}
			for _, sensor := range sc.Sensors {
				channels := sensor.Channels()
				for _, k := range config.SortedKeys(channels) {
					info.readings.Expect(sensor.ChannelName(k), channels[k].Quantity, now)
					quantities[channels[k].Quantity] = true
				}
			}
			info.nq = len(quantities)
			info.readings.active = m.activeLocked
			m.stations[stationID{site.ID, sc.ID}] = info
		}
	}
	err = m.db.Update(func(tx *bbolt.Tx) error {
		for _, b := range [][]byte{bucketAlerts, bucketHours, bucketPublish} {
			if _, err := tx.CreateBucketIfNotExists(b); err != nil {
				return err
			}
		}
		return tx.Bucket(bucketAlerts).ForEach(func(k, v []byte) error {
			var a alert.Alert
			if err := json.Unmarshal(v, &a); err != nil {
				m.log.Warn("alert state unreadable; dropped", "key", string(k), "err", err)
				return nil
			}
			m.state[a.Key] = a
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("new alert monitor: %w", err)
	}
	for _, a := range m.state {
		if !a.Active() {
			continue
		}
		m.metrics.show(a)
		// A sensor silent before the restart stays silent since its last
		// reading (the alert's value), instead of clearing and raising again.
		if info := m.stations[stationID{a.Site, a.Station}]; info != nil && a.Kind == alert.KindSilence && a.Value > 0 {
			info.readings.LastSeen(a.Sensor, a.Quantity, time.Unix(int64(a.Value), 0))
		}
	}
	m.recomputeNext()
	return m, nil
}

// ResumeReading gives the station's reading checks the sensor's latest
// reading as the state file kept it (pipeline.LastSeen), at start-up.
func (m *Monitor) ResumeReading(site, station, sensor string, q hourly.Quantity, at time.Time, v float64) {
	info := m.stations[stationID{site, station}]
	if info == nil {
		return
	}
	m.mu.Lock()
	defer m.mu.Unlock()
	info.readings.Resume(topicSafe(sensor), q, at, v)
}

// Notify adds fn to the functions called with every committed alert event
// (raised, updated, cleared). fn must not block.
func (m *Monitor) Notify(fn func(Event)) {
	m.lmu.Lock()
	defer m.lmu.Unlock()
	m.onEvent = append(m.onEvent, fn)
}

func (m *Monitor) listeners() []func(Event) {
	m.lmu.Lock()
	defer m.lmu.Unlock()
	return slices.Clone(m.onEvent)
}

// Config returns the alert settings in use.
func (m *Monitor) Config() *config.Alerts { return m.alerts }

// Active returns the active alerts, ordered by key.
func (m *Monitor) Active() []alert.Alert {
	m.mu.Lock()
	defer m.mu.Unlock()
	var out []alert.Alert
	for _, a := range m.state {
		if a.Active() {
			out = append(out, a)
		}
	}
	slices.SortFunc(out, func(a, b alert.Alert) int { return strings.Compare(a.Key.String(), b.Key.String()) })
	return out
}

// ObserveSample runs the reading-level checks on one accepted sample. The
// resulting events are persisted and published by Run (or Sync).
func (m *Monitor) ObserveSample(site, station string, s hourly.Sample, now time.Time) {
	if m.alerts.Disabled {
		return
	}
	info := m.stations[stationID{site, station}]
	if info == nil {
		return
	}
	s.Sensor = topicSafe(s.Sensor)
	m.mu.Lock()
	defer m.mu.Unlock()
	m.accumulate(stationID{site, station}, info, s)
	n := len(m.pending)
	m.scratch = info.readings.observeInto(m.scratch[:0], s, now)
	for _, f := range m.scratch {
		m.stepLocked(f)
	}
	m.heardLocked(info, s.Quantity, now, n)
}

// Heard tells the silence check that a reading of s's sensor arrived at
// now, before it is accepted: the gateway calls it for a reading it keeps
// in its journal until a checkpoint, when ObserveSample runs the other
// checks.
func (m *Monitor) Heard(site, station string, s hourly.Sample, now time.Time) {
	if m == nil || m.alerts.Disabled {
		return
	}
	info := m.stations[stationID{site, station}]
	if info == nil {
		return
	}
	m.mu.Lock()
	defer m.mu.Unlock()
	n := len(m.pending)
	if f := info.readings.Heard(topicSafe(s.Sensor), s.Quantity, now); f.Status != StatusHold {
		m.stepLocked(f)
	}
	m.heardLocked(info, s.Quantity, now, n)
}

// heardLocked moves the silence deadline for a reading of q heard at now
// and wakes the publisher when findings were queued beyond the first n.
func (m *Monitor) heardLocked(info *stationInfo, q hourly.Quantity, now time.Time, n int) {
	// m.next is kept as a lower bound of the earliest silence deadline: a
	// reading only moves its own sensor's deadline later, so the minimum is
	// recomputed (over every sensor) only when it falls due, not per sample.
	// A sensor seen for the first time may bring the bound forward.
	if d := info.readings.SilenceDeadline(q, now); !d.IsZero() && (m.next.IsZero() || d.Before(m.next)) {
		m.next = d
		m.wake()
	}
	if !m.next.IsZero() && !now.Before(m.next) {
		m.checkSilenceLocked(now)
	}
	if len(m.pending) > n {
		m.wake()
	}
}

// accumulate keeps a per-hour summary of each quantity's readings so the
// hour-level checks still see a quantity the gate excluded from the record.
// m.mu must be held.
func (m *Monitor) accumulate(_ stationID, info *stationInfo, s hourly.Sample) {
	off := time.Duration(math.Round(info.hs.UTCOffset*3600)) * time.Second
	hour := s.Time.Add(off).Truncate(time.Hour).Add(-off)
	a := info.accFor(hour.Unix())
	var st *QStats
	for i := range a.stats {
		if a.stats[i].q == s.Quantity {
			st = &a.stats[i].s
			break
		}
	}
	if st == nil {
		a.stats = append(a.stats, accStat{q: s.Quantity, s: QStats{N: 1, Min: s.Value, Max: s.Value, Mean: s.Value}})
		return
	}
	st.N++
	st.Min, st.Max = math.Min(st.Min, s.Value), math.Max(st.Max, s.Value)
	st.Mean += (s.Value - st.Mean) / float64(st.N)
}

// activeLocked reports whether the alert with key k is active; m.mu must
// be held (the reading checks ask while the monitor steps their findings).
func (m *Monitor) activeLocked(k alert.Key) bool {
	a, ok := m.state[k]
	return ok && a.Active()
}

// stepLocked applies a reading-level finding to the in-memory state and
// queues its event.
func (m *Monitor) stepLocked(f Finding) {
	prev, has := m.state[f.Key]
	next, changed, ev := Step(prev, has, f, m.alerts.UpdateEvery.D())
	if !changed {
		return
	}
	if ev == nil {
		m.state[f.Key] = next // clearing clock only; not worth a write
		return
	}
	m.state[f.Key] = next
	m.pending = append(m.pending, *ev)
}

func (m *Monitor) silenceLocked(now time.Time) {
	for _, info := range m.stations {
		for _, f := range info.readings.Silence(now) {
			m.stepLocked(f)
		}
	}
}

func (m *Monitor) recomputeNext() {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.recomputeNextLocked()
}

func (m *Monitor) recomputeNextLocked() {
	m.next = time.Time{}
	if m.alerts.Disabled {
		return // no silence check: Run must not wake for one
	}
	for _, info := range m.stations {
		if n := info.readings.NextSilence(); !n.IsZero() && (m.next.IsZero() || n.Before(m.next)) {
			m.next = n
		}
	}
}

func (m *Monitor) wake() {
	select {
	case m.notify <- struct{}{}:
	default:
	}
}

// CheckSilence runs the silence check at now; events are queued for Sync.
func (m *Monitor) CheckSilence(now time.Time) {
	if m.alerts.Disabled {
		return
	}
	m.mu.Lock()
	defer m.mu.Unlock()
	n := len(m.pending)
	m.checkSilenceLocked(now)
	if len(m.pending) > n {
		m.wake()
	}
}

// checkSilenceLocked runs the silence check at now and recomputes the next
// deadline exactly.
func (m *Monitor) checkSilenceLocked(now time.Time) {
	m.silenceLocked(now)
	m.recomputeNextLocked()
	// A silent sensor stays due: look again a minute later rather than on
	// every reading.
	if !m.next.IsZero() && !m.next.After(now) {
		m.next = now.Add(time.Minute)
	}
}

// Sync persists the queued reading-level events in one transaction: alert
// state, retained message to publish, and store point.
func (m *Monitor) Sync() error {
	m.syncMu.Lock()
	defer m.syncMu.Unlock()
	m.mu.Lock()
	evs := m.pending
	m.pending = nil
	m.mu.Unlock()
	if len(evs) == 0 {
		return nil
	}
	err := m.db.Update(func(tx *bbolt.Tx) error {
		for _, ev := range evs {
			if err := m.persist(tx, ev.Alert, &ev); err != nil {
				return err
			}
		}
		tx.OnCommit(func() { m.committed(evs, nil, false) })
		return nil
	})
	if err != nil {
		m.mu.Lock()
		m.pending = append(evs, m.pending...)
		m.mu.Unlock()
		return fmt.Errorf("sync alerts: %w", err)
	}
	return nil
}

// CommitObserved writes the reading-level events queued so far (those of
// the samples the pipeline's transaction tx stores, and any before them) in
// tx, so that a kill cannot keep a sample and lose the alert it raised or
// cleared (pipeline.SampleCommitter). While Sync is writing older events it
// leaves them to the next Sync, which keeps each key's order.
func (m *Monitor) CommitObserved(tx *bbolt.Tx) error {
	if !m.syncMu.TryLock() {
		return nil
	}
	m.holding = true
	m.mu.Lock()
	evs := m.pending
	m.pending = nil
	m.mu.Unlock()
	m.inTx = evs
	for i := range evs {
		if err := m.persist(tx, evs[i].Alert, &evs[i]); err != nil {
			return err // the pipeline calls AbortObserved
		}
	}
	tx.OnCommit(func() {
		m.inTx = nil
		m.holding = false
		m.syncMu.Unlock()
		if len(evs) > 0 {
			m.committed(evs, nil, false)
		}
	})
	return nil
}

// AbortObserved is called when the transaction CommitObserved wrote in
// did not commit: its events are queued again, ahead of later ones.
func (m *Monitor) AbortObserved() {
	if !m.holding {
		return
	}
	m.mu.Lock()
	m.pending = append(m.inTx, m.pending...)
	m.mu.Unlock()
	m.inTx = nil
	m.holding = false
	m.syncMu.Unlock()
}

// persist writes one alert's state, and for an event its retained message
// and store point, in tx.
func (m *Monitor) persist(tx *bbolt.Tx, a alert.Alert, ev *Event) error {
	b, err := json.Marshal(a)
	if err != nil {
		return err
	}
	if err := tx.Bucket(bucketAlerts).Put([]byte(a.Key.String()), b); err != nil {
		return err
	}
	if ev == nil {
		return nil
	}
	payload, err := MarshalAlert(ev.Alert)
	if err != nil {
		return err
	}
	if err := tx.Bucket(bucketPublish).Put([]byte(Topic(m.alerts.TopicPrefix, ev.Alert.Key)), payload); err != nil {
		return err
	}
	if m.outbox != nil {
		if err := m.outbox.Enqueue(tx, AlertPoint(*ev)); err != nil {
			return err
		}
	}
	return nil
}

// committed applies persisted changes to metrics and callbacks, and, for
// changes made inside a transaction (fromTx: hour-level and external
// alerts), to the in-memory state. Reading-level changes are in memory
// before they are persisted. states holds states changed without an event.
func (m *Monitor) committed(evs []Event, states []alert.Alert, fromTx bool) {
	m.mu.Lock()
	for _, a := range states {
		m.state[a.Key] = a
	}
	if fromTx {
		for _, ev := range evs {
			m.state[ev.Alert.Key] = ev.Alert
		}
	}
	m.mu.Unlock()
	for _, ev := range evs {
		m.metrics.event(ev)
		switch ev.Type {
		case EventRaised:
			m.log.Warn("alert raised", "alert", ev.Alert.Key.String(), "severity", ev.Alert.Severity, "evidence", ev.Alert.Message)
		case EventUpdated:
			m.log.Info("alert updated", "alert", ev.Alert.Key.String(), "evidence", ev.Alert.Message)
		case EventCleared:
			m.log.Info("alert cleared", "alert", ev.Alert.Key.String(), "evidence", ev.Alert.Message)
		}
		for _, fn := range m.listeners() {
			fn(ev)
		}
	}
	if len(evs) > 0 {
		m.wake()
	}
}

// HandleHour records the closed hour for the hour-level checks, runs them,
// and commits their alert changes in tx (the hour's closing transaction).
func (m *Monitor) HandleHour(tx *bbolt.Tx, rec hourly.Record) error {
	if m.alerts.Disabled {
		return nil
	}
	id := stationID{rec.Site, rec.Station}
	info := m.stations[id]
	if info == nil {
		return nil
	}
	obs := m.observe(info, rec)
	hb, err := tx.Bucket(bucketHours).CreateBucketIfNotExists([]byte(rec.Site + "/" + rec.Station))
	if err != nil {
		return fmt.Errorf("alerts: handle hour: %w", err)
	}
	if err := putObs(hb, obs); err != nil {
		return fmt.Errorf("alerts: handle hour: %w", err)
	}
	cutoff := obs.Start.Add(-keepHours)
	if err := pruneObs(hb, cutoff); err != nil {
		return fmt.Errorf("alerts: handle hour: %w", err)
	}
	m.winMu.Lock()
	defer m.winMu.Unlock()
	w, err := m.windowLocked(tx, id)
	if err != nil {
		return fmt.Errorf("alerts: handle hour: %w", err)
	}
	w = withObs(w, obs, cutoff)
	m.txWin[id] = w
	tx.OnCommit(func() {
		m.winMu.Lock()
		m.windows[id] = w
		m.winMu.Unlock()
	})
	findings := HourChecks(rec.Site, rec.Station, m.alerts, info.choices, w)
	if info.choices.Neighbours {
		windows := map[string][]HourObs{rec.Station: w}
		for oid, other := range m.stations {
			if oid.site != rec.Site || oid.station == rec.Station || !other.choices.Neighbours {
				continue
			}
			if windows[oid.station], err = m.windowLocked(tx, oid); err != nil {
				return fmt.Errorf("alerts: handle hour: %w", err)
			}
		}
		findings = append(findings, NeighbourChecks(rec.Site, rec.Station, m.alerts, windows)...)
	}
	evs, states, err := m.applyTx(tx, findings)
	if err != nil {
		return fmt.Errorf("alerts: handle hour: %w", err)
	}
	m.pruneAcc(info, obs.Start.Add(-info.keepAcc))
	if len(evs) > 0 || len(states) > 0 {
		tx.OnCommit(func() { m.committed(evs, states, true) })
	}
	return nil
}

// applyTx steps each finding against the alert state stored in tx and
// writes the changes.
func (m *Monitor) applyTx(tx *bbolt.Tx, findings []Finding) ([]Event, []alert.Alert, error) {
	ab := tx.Bucket(bucketAlerts)
	var evs []Event
	var states []alert.Alert
	for _, f := range findings {
		var prev alert.Alert
		has := false
		if v := ab.Get([]byte(f.Key.String())); v != nil {
			if err := json.Unmarshal(v, &prev); err == nil {
				has = true
			}
		}
		next, changed, ev := Step(prev, has, f, m.alerts.UpdateEvery.D())
		if !changed {
			continue
		}
		if err := m.persist(tx, next, ev); err != nil {
			return nil, nil, err
		}
		if ev != nil {
			evs = append(evs, *ev)
		} else {
			states = append(states, next)
		}
	}
	return evs, states, nil
}

// observe builds the hour-level summary of a record.
func (m *Monitor) observe(info *stationInfo, rec hourly.Record) HourObs {
	o := HourObs{Start: rec.Start.UTC(), Revision: rec.Revision, Q: map[hourly.Quantity]QStats{}}
	off := time.Duration(math.Round(info.hs.UTCOffset*3600)) * time.Second
	o.Local = rec.Start.UTC().Add(off)
	if r := rec.Result; r != nil {
		o.HasSun, o.SunElevation, o.Ra, o.Rso = true, r.SunElevation, r.Ra, r.Rso
		o.Ea = r.Ea
	} else {
		sp := hourly.SunForPeriod(info.hs, rec.Start, time.Hour) // FAO-56 eq. 28-31, ASCE-EWRI 2005 eq. 62
		o.HasSun, o.SunElevation, o.Ra = true, sp.Elevation, sp.Ra
		o.Rso = hourly.RsoSimple(sp.Ra, info.hs.Elevation) // FAO-56 eq. 37
	}
	for q, s := range rec.Stats {
		if s.Count > 0 {
			o.Q[q] = QStats{N: s.Count, Min: s.Min, Max: s.Max, Mean: s.Mean}
		}
	}
	m.mu.Lock()
	for _, a := range info.accAt(o.Start.Unix()) {
		if _, ok := o.Q[a.q]; !ok {
			o.Q[a.q] = a.s // excluded from the record by the gate: use the readings seen
		}
	}
	m.mu.Unlock()
	return o
}

// pruneAcc drops the station's readings accumulated for hours before
// before: a visit of its own few hours, not of every station's.
func (m *Monitor) pruneAcc(info *stationInfo, before time.Time) {
	m.mu.Lock()
	defer m.mu.Unlock()
	cut := before.Unix()
	i := 0
	for i < len(info.acc) && info.acc[i].hour < cut {
		i++
	}
	if i == 0 {
		return
	}
	n := copy(info.acc, info.acc[i:])
	clear(info.acc[n:])
	info.acc = info.acc[:n]
}

func obsKey(t time.Time) []byte { return binary.BigEndian.AppendUint64(nil, uint64(t.Unix())) }

func putObs(b *bbolt.Bucket, o HourObs) error {
	v, err := json.Marshal(o)
	if err != nil {
		return err
	}
	return b.Put(obsKey(o.Start), v)
}

func pruneObs(b *bbolt.Bucket, before time.Time) error {
	c := b.Cursor()
	limit := obsKey(before)
	for k, _ := c.First(); k != nil && bytes.Compare(k, limit) < 0; k, _ = c.First() {
		if err := b.Delete(k); err != nil {
			return err
		}
	}
	return nil
}

// windowLocked returns the window of closed hours of a station as seen by
// tx: changed earlier in tx, else as last committed, else read from the
// state file (after a restart). Write transactions are serialised, so
// changes made by any other transaction were either committed (and are in
// m.windows) or rolled back. The caller holds m.winMu.
func (m *Monitor) windowLocked(tx *bbolt.Tx, id stationID) ([]HourObs, error) {
	if m.txOf != tx {
		m.txOf, m.txWin = tx, map[stationID][]HourObs{}
	}
	if w, ok := m.txWin[id]; ok {
		return w, nil
	}
	if w, ok := m.windows[id]; ok {
		return w, nil
	}
	b := tx.Bucket(bucketHours).Bucket([]byte(id.site + "/" + id.station))
	if b == nil {
		return nil, nil
	}
	return readWindow(b)
}

// withObs returns a copy of w with o inserted (or replacing the hour it
// revises) and the hours before cutoff removed, in time order.
func withObs(w []HourObs, o HourObs, cutoff time.Time) []HourObs {
	i, found := slices.BinarySearchFunc(w, o.Start, func(x HourObs, t time.Time) int { return x.Start.Compare(t) })
	out := make([]HourObs, 0, len(w)+1)
	out = append(out, w[:i]...)
	out = append(out, o)
	if found {
		i++
	}
	out = append(out, w[i:]...)
	return slices.DeleteFunc(out, func(x HourObs) bool { return x.Start.Before(cutoff) })
}

func readWindow(b *bbolt.Bucket) ([]HourObs, error) {
	var w []HourObs
	err := b.ForEach(func(_, v []byte) error {
		var o HourObs
		if err := json.Unmarshal(v, &o); err != nil {
			return fmt.Errorf("read hour window: %w", err)
		}
		w = append(w, o)
		return nil
	})
	return w, err
}

// Gate flags an hour computed while an alert on its station was active (at
// any time within the hour) and applies the configured response to the
// alerted quantity: critical alerts only; warnings just flag. Flags read
// "alert:<kind>:<quantity>".
func (m *Monitor) Gate(site, station string, hourStart time.Time) pipeline.Gate {
	var g pipeline.Gate
	if m.alerts.Disabled {
		return g
	}
	end := hourStart.Add(time.Hour)
	m.mu.Lock()
	defer m.mu.Unlock()
	flags := map[string]bool{}
	exclude := map[hourly.Quantity]bool{}
	for _, a := range m.state {
		if a.Site != site || a.Station != station || !a.Since.Before(end) || (!a.Active() && !a.Cleared.After(hourStart)) {
			continue
		}
		flags["alert:"+string(a.Kind)+":"+string(a.Quantity)] = true
		if a.Severity != alert.SeverityCritical || a.Kind == alert.KindSilence || !slices.Contains(hourly.Quantities, a.Quantity) {
			continue
		}
		switch m.alerts.ResponseFor(site, station, a.Quantity) {
		case config.RespondExclude:
			exclude[a.Quantity] = true
		case config.RespondStop:
			g.StopET = true
		}
	}
	g.Flags = slices.Sorted(maps.Keys(flags))
	g.Exclude = slices.Sorted(maps.Keys(exclude))
	return g
}

var _ alert.Raiser = (*Monitor)(nil)

// Raise raises (or updates) an alert on behalf of another component, e.g.
// the zone scheduler (alert.KindZoneETStale, alert.KindValveNoReport,
// alert.KindValveFailed with an alert.ZoneKey). With a nil tx it runs its own
// transaction. a.Since is the time of the event.
func (m *Monitor) Raise(tx *bbolt.Tx, a alert.Alert) error {
	if err := a.Key.Validate(); err != nil {
		return fmt.Errorf("raise alert: %w", err)
	}
	if a.Severity == "" {
		a.Severity = alert.SeverityWarning
	}
	f := Finding{Key: a.Key, Status: StatusBad, Severity: a.Severity, Message: a.Message, Value: a.Value, Limit: a.Limit, At: a.Since}
	if f.At.IsZero() {
		f.At = m.clock.Now()
	}
	return m.external(tx, f)
}

// Clear clears an alert raised with Raise; message says why. Clearing an
// alert that is not active does nothing.
func (m *Monitor) Clear(tx *bbolt.Tx, key alert.Key, at time.Time, message string) error {
	if err := key.Validate(); err != nil {
		return fmt.Errorf("clear alert: %w", err)
	}
	if at.IsZero() {
		at = m.clock.Now()
	}
	return m.external(tx, Finding{Key: key, Status: StatusGood, Message: message, At: at})
}

func (m *Monitor) external(tx *bbolt.Tx, f Finding) error {
	run := func(tx *bbolt.Tx) error {
		evs, states, err := m.applyTx(tx, []Finding{f})
		if err != nil {
			return fmt.Errorf("alert %s: %w", f.Key, err)
		}
		if len(evs) > 0 || len(states) > 0 {
			tx.OnCommit(func() { m.committed(evs, states, true) })
		}
		return nil
	}
	if tx != nil {
		return run(tx)
	}
	return m.db.Update(run)
}

// Run is the monitor's background loop: RunOnce whenever a sensor falls due
// for the silence check, a publish retry is due, or new events arrive. It
// returns when ctx is cancelled.
func (m *Monitor) Run(ctx context.Context) error {
	return clock.Loop(ctx, m.clock, m.notify, m)
}

// RunOnce does one pass at now: it runs the silence check when a sensor has
// fallen due, persists reading-level events, prunes old cleared alerts and
// publishes pending alert messages. It returns the next silence deadline, or
// sooner the time to retry publishing while the broker is away (backing
// off); zero when neither is pending.
func (m *Monitor) RunOnce(ctx context.Context, now time.Time) (time.Time, error) {
	m.mu.Lock()
	due := !m.next.IsZero() && !now.Before(m.next)
	m.mu.Unlock()
	if due {
		m.CheckSilence(now)
	}
	if err := m.Sync(); err != nil {
		m.log.Error("persisting alerts", "err", err)
	}
	if err := m.prune(now); err != nil {
		m.log.Error("pruning alerts", "err", err)
	}
	var retry time.Time
	if err := m.publishPending(ctx); err != nil {
		if ctx.Err() != nil {
			return time.Time{}, nil
		}
		m.backoff = min(max(2*m.backoff, time.Second), maxPublishBackoff)
		m.log.Warn("alert messages not published; will retry", "err", err, "in", m.backoff)
		retry = now.Add(m.backoff)
	} else {
		m.backoff = 0
	}
	m.mu.Lock()
	next := m.next
	m.mu.Unlock()
	if next.IsZero() || (!retry.IsZero() && retry.Before(next)) {
		next = retry
	}
	return next, nil
}

var _ clock.Stepper = (*Monitor)(nil)

// Flush persists queued events and tries once to publish what is pending;
// the gateway calls it at shutdown.
func (m *Monitor) Flush(ctx context.Context) error {
	return errors.Join(m.Sync(), m.publishPending(ctx))
}

// publishPending publishes every pending retained alert message and forgets
// the ones published (unless they changed meanwhile).
func (m *Monitor) publishPending(ctx context.Context) error {
	if m.pub == nil {
		return nil
	}
	type msg struct {
		topic   string
		payload []byte
	}
	var msgs []msg
	err := m.db.View(func(tx *bbolt.Tx) error {
		return tx.Bucket(bucketPublish).ForEach(func(k, v []byte) error {
			msgs = append(msgs, msg{string(k), bytes.Clone(v)})
			return nil
		})
	})
	if err != nil || len(msgs) == 0 {
		return err
	}
	var done []msg
	var errs []error
	for _, x := range msgs {
		pctx, cancel := context.WithTimeout(ctx, 10*time.Second)
		err := m.pub.Publish(pctx, x.topic, 1, true, x.payload)
		cancel()
		if err != nil {
			m.metrics.publishErrors.Inc()
			errs = append(errs, fmt.Errorf("publish %s: %w", x.topic, err))
			break // the broker is probably away; keep the order for the retry
		}
		done = append(done, x)
	}
	if len(done) > 0 {
		err := m.db.Update(func(tx *bbolt.Tx) error {
			b := tx.Bucket(bucketPublish)
			for _, x := range done {
				if bytes.Equal(b.Get([]byte(x.topic)), x.payload) {
					if err := b.Delete([]byte(x.topic)); err != nil {
						return err
					}
				}
			}
			return nil
		})
		errs = append(errs, err)
	}
	return errors.Join(errs...)
}

// prune forgets alerts cleared longer than keepCleared ago.
func (m *Monitor) prune(now time.Time) error {
	m.mu.Lock()
	var old []alert.Key
	for k, a := range m.state {
		if !a.Active() && now.Sub(a.Cleared) > keepCleared {
			old = append(old, k)
		}
	}
	m.mu.Unlock()
	if len(old) == 0 {
		return nil
	}
	err := m.db.Update(func(tx *bbolt.Tx) error {
		b := tx.Bucket(bucketAlerts)
		for _, k := range old {
			v := b.Get([]byte(k.String()))
			var a alert.Alert
			if v == nil || json.Unmarshal(v, &a) != nil || a.Active() {
				continue // raised again meanwhile
			}
			if err := b.Delete([]byte(k.String())); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return err
	}
	m.mu.Lock()
	for _, k := range old {
		if a, ok := m.state[k]; ok && !a.Active() {
			delete(m.state, k)
		}
	}
	m.mu.Unlock()
	return nil
}

// Topic returns the retained topic of an alert:
// <prefix>/<site>/alerts/<station>/<sensor>/<quantity>/<kind>.
func Topic(prefix string, k alert.Key) string {
	return config.AlertTopic(prefix, k.Site, k.Station, k.Sensor, string(k.Quantity), string(k.Kind))
}

// alertJSON is the retained payload of an active alert.
type alertJSON struct {
	Site     string    `json:"site"`
	Station  string    `json:"station"`
	Sensor   string    `json:"sensor"`
	Zone     string    `json:"zone,omitempty"` // zone alerts (station "zones"): the zone id
	Quantity string    `json:"quantity"`
	Kind     string    `json:"kind"`
	Severity string    `json:"severity"`
	State    string    `json:"state"`
	Message  string    `json:"message"`
	Value    *float64  `json:"value,omitempty"`
	Limit    *float64  `json:"limit,omitempty"`
	Since    time.Time `json:"since"`
	Updated  time.Time `json:"updated"`
}

func finite(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

// shown is v rounded as the alert's message shows it (about three
// significant digits), or nil when v is not finite: the retained payload's
// value and limit.
func shown(v float64) *float64 {
	if f := finite(v); f != nil {
		r := roundNum(*f)
		return &r
	}
	return nil
}

// MarshalAlert returns the retained payload of an alert: its JSON while
// active, empty once cleared (an empty retained message removes the topic's
// retained state at the broker).
func MarshalAlert(a alert.Alert) ([]byte, error) {
	if !a.Active() {
		return []byte{}, nil
	}
	return json.Marshal(alertJSON{
		Site: a.Site, Station: a.Station, Sensor: a.Sensor, Zone: a.Zone(), Quantity: string(a.Quantity), Kind: string(a.Kind),
		Severity: string(a.Severity), State: "active", Message: a.Message,
		Value: shown(a.Value), Limit: shown(a.Limit), Since: a.Since.UTC(), Updated: a.Updated.UTC(),
	})
}

// AlertPoint returns the store point of an alert event: measurement
// sensor_alert (zone_alert for a zone's fault, tagged site, zone, quantity,
// kind); tags site, station, sensor, quantity, kind; fields active
// (bool: false once cleared), critical (bool), value, limit; notes (local
// history only) event, severity, message; time = the event time.
func AlertPoint(ev Event) store.Point {
	a := ev.Alert
	fields := map[string]any{"active": a.Active(), "critical": a.Severity == alert.SeverityCritical}
	if v := finite(a.Value); v != nil {
		fields["value"] = *v
	}
	if v := finite(a.Limit); v != nil {
		fields["limit"] = *v
	}
	var p store.Point
	if z := a.Zone(); z != "" {
		p = store.ZoneAlertPoint(a.Site, z, string(a.Kind), a.Updated, fields)
	} else {
		p = store.AlertPoint(a.Site, a.Station, a.Sensor, string(a.Kind), a.Updated, fields)
	}
	p.Tags["quantity"] = string(a.Quantity)
	p.Notes = map[string]string{"event": string(ev.Type), "severity": string(a.Severity), "message": a.Message}
	return p
}

// topicSafe replaces the characters MQTT reserves in topic levels.
func topicSafe(s string) string {
	if !strings.ContainsAny(s, "/+#") {
		return s
	}
	return strings.Map(func(r rune) rune {
		if r == '/' || r == '+' || r == '#' {
			return '_'
		}
		return r
	}, s)
}
