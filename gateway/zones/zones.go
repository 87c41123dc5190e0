// Package zones is the gateway's adapter around the controllers: it steps
// every zone's water balance inside each closing hour's transaction, runs the
// scheduler that plans, publishes and tracks valve commands over MQTT,
// credits reported water, and takes manual holds and rain delays.
//
// Everything durable lives in the state file (bucket "zones"): zone balance,
// command ledger and holds. Every change is one bbolt transaction, together
// with the store points that describe it.
package zones

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"sort"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/alert"
	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/internal/precision"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/store"
	"etpulse/hourly"
)

// Broker is the MQTT connection the service uses.
type Broker interface {
	mqtt.Publisher
	mqtt.Subscriber
}

var _ Broker = (*mqtt.Client)(nil)

// DefaultTopicPrefix is the first level of the hold and default zone topics
// when neither Options nor the configuration name one.
const DefaultTopicPrefix = config.DefaultTopicPrefix

// Options configure a Service.
type Options struct {
	Config *config.Config
	DB     *bbolt.DB
	MQTT   Broker         // nil: no commands are sent (replay); Run needs it
	Store  store.Enqueuer // nil: no points
	// Alerts receives the zone alerts (stale ET, valve without report,
	// failed valve) inside the zone's own transactions; nil: they are only
	// written to the store as points (replay, backtest).
	Alerts alert.Raiser
	Logger *slog.Logger // nil discards
	// Registerer receives the zone metrics; nil: not registered.
	Registerer prometheus.Registerer
	// Clock is the service's time and its waits; nil: clock.Real.
	Clock clock.Clock
	// TopicPrefix is the first level of <prefix>/<site>/hold,
	// <prefix>/<site>/hold/reply and the default zone command and report
	// topics; "" means the configuration's topic_prefix.
	TopicPrefix string
	// OnEvent, when set, sees every step, command and credit (demo output).
	// It is called after the change is committed and must not block.
	OnEvent func(Event)
	// LedgerRetention keeps finished commands this long; 0 means 30 days.
	LedgerRetention time.Duration
}

// EventKind names what happened.
type EventKind string

// The event kinds.
const (
	EventStep      EventKind = "step"      // an hour stepped the balance
	EventPlanned   EventKind = "planned"   // a command was planned
	EventSent      EventKind = "sent"      // a command was published (Attempt 1) or re-sent
	EventCancelled EventKind = "cancelled" // a planned command was withdrawn (hold, weather)
	EventExpired   EventKind = "expired"   // no (further) report came: alerted, not credited
	EventReport    EventKind = "report"    // a valve report arrived
	EventCredited  EventKind = "credited"  // reported water was credited
	EventSkip      EventKind = "skip"      // a zone got no command (reason changed)
	EventHold      EventKind = "hold"      // a hold, release or rain delay was applied
	EventAlert     EventKind = "alert"     // the zone's ET went stale or came back
	EventStop      EventKind = "stop"      // a stop was published for a sent or running command (Attempt: StopAttempts)
)

// Event is one thing the service did, for display.
type Event struct {
	Time    time.Time
	Site    string
	Zone    string
	Kind    EventKind
	Command *controllers.Command // planned, sent, cancelled, expired, report, credited, stop
	Step    *controllers.Step    // step, credited
	Text    string
}

type zoneRef struct {
	site, id    string
	cfg         *config.Zone
	z           *controllers.Zone
	cmdTopic    string
	reportTopic string
	initial     float64
	acceptsRef  map[hourly.Reference]bool
}

type siteRef struct {
	id      string
	zones   []*zoneRef
	sources []controllers.Source
}

// Service is the zone balance (an hour handler) and the valve command
// scheduler (a gateway service).
type Service struct {
	o         Options
	log       *slog.Logger
	sites     []*siteRef
	zones     map[string]*zoneRef // site/zone
	byStation map[[2]string][]*zoneRef
	m         *metrics
	wake      chan struct{}

	mu       sync.Mutex
	resumeAt time.Time // retries of commands sent before this run wait until then
	started  time.Time // when this service started: the stale-ET alert's grace starts here
	// forecasts are the sites' latest forecasts (SetForecast); kept in
	// memory: the forecast topic is retained.
	forecasts      map[string]*controllers.Forecast
	forecastWarned map[string]*controllers.Forecast
	meters         map[string][]*meterRef  // per site (meters.go)
	probeRefs      map[probeKey][]*zoneRef // probe channels (probes.go)
	probeLatest    probeLatest
}

// New builds the service for every zone of cfg.
func New(o Options) (*Service, error) {
	if o.Config == nil || o.DB == nil {
		return nil, errors.New("new zones: config and state database are required")
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	o.Clock = clock.Or(o.Clock)
	if o.TopicPrefix == "" {
		o.TopicPrefix = o.Config.Prefix()
	}
	if o.LedgerRetention <= 0 {
		o.LedgerRetention = 30 * 24 * time.Hour
	}
	s := &Service{o: o, log: o.Logger, zones: map[string]*zoneRef{}, byStation: map[[2]string][]*zoneRef{}, wake: make(chan struct{}, 1), started: o.Clock.Now()}
	for i := range o.Config.Sites {
		site := &o.Config.Sites[i]
		sr := &siteRef{id: site.ID}
		for j := range site.Sources {
			sr.sources = append(sr.sources, site.Sources[j].Controller())
		}
		for j := range site.Zones {
			zc := &site.Zones[j]
			st := site.StationByID(zc.Station)
			if st == nil {
				return nil, fmt.Errorf("new zones: zone %s: no station %q", zc.ID, zc.Station)
			}
			cz, err := zc.Controller(st)
			if err != nil {
				return nil, fmt.Errorf("new zones: %w", err)
			}
			ref := &zoneRef{site: site.ID, id: zc.ID, cfg: zc, z: cz,
				cmdTopic: zc.CommandTopicIn(o.TopicPrefix, site.ID), reportTopic: zc.ReportTopicIn(o.TopicPrefix, site.ID),
				initial: zc.Soil.InitialDepletionMM, acceptsRef: map[hourly.Reference]bool{}}
			for _, r := range []hourly.Reference{hourly.Short, hourly.Tall, hourly.FAO56} {
				ref.acceptsRef[r] = zc.AcceptsReference(string(r))
			}
			sr.zones = append(sr.zones, ref)
			s.zones[site.ID+"/"+zc.ID] = ref
			k := [2]string{site.ID, zc.Station}
			s.byStation[k] = append(s.byStation[k], ref)
		}
		if len(sr.zones) > 0 {
			s.sites = append(s.sites, sr)
		}
	}
	s.newMeters()
	s.newProbes()
	m, err := newMetrics(o.Registerer, s)
	if err != nil {
		return nil, fmt.Errorf("new zones: %w", err)
	}
	s.m = m
	if err := o.DB.View(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		for _, ref := range s.zones {
			r, err := s.loadZone(b, ref)
			if err != nil {
				return err
			}
			s.m.setLevels(ref, &r.State, o.Clock.Now())
		}
		return nil
	}); err != nil {
		return nil, fmt.Errorf("new zones: %w", err)
	}
	return s, nil
}

// Zones returns "site/zone" of every zone, sorted.
func (s *Service) Zones() []string {
	var out []string
	for k := range s.zones {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

func (s *Service) poke() {
	select {
	case s.wake <- struct{}{}:
	default:
	}
}

func (s *Service) emit(e Event) {
	if s.o.OnEvent != nil {
		s.o.OnEvent(e)
	}
}

func (s *Service) enqueue(tx *bbolt.Tx, pts ...store.Point) error {
	if s.o.Store == nil || len(pts) == 0 {
		return nil
	}
	return s.o.Store.Enqueue(tx, pts...)
}

// HandleHour steps every zone driven by rec's station (and reference) inside
// the transaction that closes the hour. A record the balance refuses (bad
// values) is logged and skipped, never failing the hour.
func (s *Service) HandleHour(tx *bbolt.Tx, rec hourly.Record) error {
	refs := s.byStation[[2]string{rec.Site, rec.Station}]
	if len(refs) == 0 {
		return nil
	}
	b, err := openBuckets(tx)
	if err != nil {
		return fmt.Errorf("zones handle hour: %w", err)
	}
	var events []Event
	for _, ref := range refs {
		if !ref.acceptsRef[rec.Reference] {
			continue
		}
		zr, err := s.loadZone(b, ref)
		if err != nil {
			return fmt.Errorf("zones handle hour: %w", err)
		}
		step, ok, err := ref.z.StepHour(&zr.State, controllers.InputFromRecord(rec))
		if err != nil {
			if errors.Is(err, controllers.ErrInput) {
				s.log.Warn("zone hour refused", "site", ref.site, "zone", ref.id, "hour", rec.Start, "err", err)
				continue
			}
			return fmt.Errorf("zones handle hour: %w", err)
		}
		if !ok {
			continue
		}
		if err := s.fuseProbes(tx, ref, &zr.State, &step); err != nil {
			return fmt.Errorf("zones handle hour: %w", err)
		}
		if err := putZone(b, ref.site, ref.id, &zr); err != nil {
			return fmt.Errorf("zones handle hour: %w", err)
		}
		if err := s.enqueue(tx, stepPoint(ref.site, step)); err != nil {
			return fmt.Errorf("zones handle hour: %w", err)
		}
		st := zr.State
		ref := ref
		tx.OnCommit(func() { s.m.setLevels(ref, &st, rec.End) })
		events = append(events, Event{Time: rec.End, Site: ref.site, Zone: ref.id, Kind: EventStep, Step: &step})
	}
	if len(events) > 0 {
		tx.OnCommit(func() {
			for _, e := range events {
				s.emit(e)
			}
			s.poke()
		})
	}
	return nil
}

// stepPoint describes a balance step for the store. An hour's point carries
// the hour's totals, so a revision overwriting it (same time) stays right.
func stepPoint(site string, st controllers.Step) store.Point {
	f := map[string]any{
		"kc": st.Kc, "ks": st.Ks, "p": st.P,
		"irrigation_mm": st.Irrigation, "depletion_mm": st.Depletion,
		"taw_mm": st.TAW, "raw_mm": st.RAW, "adjust_mm": st.Adjust,
		"revision": int64(st.Revision), "fallback": st.Fallback, "missing": st.Missing,
		"estimated": st.Fill != "",
	}
	probeFields(f, st)
	notes := map[string]string{"kind": string(st.Kind)}
	if st.Fill != "" {
		notes["fill"] = st.Fill
	}
	if st.Kind == controllers.StepHour {
		f["et_mm"], f["etc_mm"], f["rain_mm"], f["eff_rain_mm"], f["drainage_mm"] = st.Hour.ET, st.Hour.ETc, st.Hour.Rain, st.Hour.EffRain, st.Hour.Drainage
	} else {
		f["et_mm"], f["etc_mm"], f["rain_mm"], f["eff_rain_mm"], f["drainage_mm"] = 0.0, 0.0, 0.0, 0.0, st.Drainage
		notes["command"] = st.CommandID
	}
	p := store.ZonePoint(site, st.Zone, st.Start, f)
	p.Notes = notes
	return p
}

func commandPoint(site string, c *controllers.Command, outcome string, t time.Time) store.Point {
	p := store.CommandPoint(site, c.Zone, t, map[string]any{
		"minutes": int64(c.Minutes), "cycle": int64(c.Cycle), "cycles": int64(c.Cycles), "attempt": int64(c.Attempts),
		"depletion_mm": c.Reason.DepletionMM, "trigger_mm": c.Reason.TriggerMM, "etc_since_last_mm": c.Reason.EtcSinceLastMM,
		"planned_start_unix": c.Start.Unix(),
	})
	p.Notes = map[string]string{"id": c.ID, "outcome": outcome, "valve": c.Valve, "state": string(c.State), "note": c.Note}
	return p
}

func reportPoint(site, zone string, r controllers.Report, out controllers.Outcome, t time.Time) store.Point {
	p := store.ReportPoint(site, zone, t, map[string]any{
		"minutes_run": r.MinutesRun, "volume_l": r.VolumeL, "credit_mm": out.CreditMM,
		"credited": out.Credit, "duplicate": out.Duplicate, "late": out.Late,
	})
	p.Notes = map[string]string{"id": r.ID, "state": string(r.State), "reason": r.Reason}
	return p
}

// outgoing is a command or a stop to publish once its transaction has
// committed.
type outgoing struct {
	topic   string
	payload []byte
	cmd     controllers.Command
	first   bool
	stop    bool // payload is a StopMessage
}

// Run subscribes to the report and hold topics (Start) and runs the
// scheduler until ctx ends: RunOnce at the next command deadline, window
// start, hold end or staleness deadline, and whenever an hour, a report or a
// hold arrives.
func (s *Service) Run(ctx context.Context) error {
	if err := s.Start(ctx); err != nil {
		return err
	}
	s.log.Info("zone scheduler running", "zones", len(s.zones))
	return clock.Loop(ctx, s.o.Clock, s.wake, s)
}

// Start subscribes to the report, hold and water topics. Reports queued by
// the broker while the gateway was away arrive after the subscription, so
// commands sent by an earlier run are not re-sent for one ack timeout.
// A caller that steps the service itself calls Start once, then RunOnce.
func (s *Service) Start(ctx context.Context) error {
	if s.o.MQTT == nil {
		return errors.New("run zones: no MQTT connection")
	}
	var grace time.Duration
	for _, ref := range s.zones {
		grace = max(grace, ref.z.Policy.AckTimeout)
	}
	s.mu.Lock()
	s.resumeAt = s.o.Clock.Now().Add(grace)
	s.mu.Unlock()
	for _, site := range s.sites {
		for _, ref := range site.zones {
			if err := s.o.MQTT.Subscribe(ref.reportTopic, 1, s.onReport(ref)); err != nil {
				return fmt.Errorf("run zones: subscribe %s: %w", ref.reportTopic, err)
			}
		}
		t := config.HoldTopic(s.o.TopicPrefix, site.id)
		if err := s.o.MQTT.Subscribe(t, 1, s.onHold(site)); err != nil {
			return fmt.Errorf("run zones: subscribe %s: %w", t, err)
		}
		ft := config.ForecastTopic(s.o.TopicPrefix, site.id)
		if err := s.o.MQTT.Subscribe(ft, 1, s.onForecast(site)); err != nil {
			return fmt.Errorf("run zones: subscribe %s: %w", ft, err)
		}
		if err := s.subscribeMeters(site.id); err != nil {
			return err
		}
		wt := config.WaterTopic(s.o.TopicPrefix, site.id)
		if err := s.o.MQTT.Subscribe(wt, 1, s.onWater(site)); err != nil {
			return fmt.Errorf("run zones: subscribe %s: %w", wt, err)
		}
	}
	return nil
}

// RunOnce runs one scheduling pass at now (tick) and publishes the commands
// and stops it decided; it returns when the next pass is due.
func (s *Service) RunOnce(ctx context.Context, now time.Time) (time.Time, error) {
	next, sends, err := s.tick(now)
	if err != nil {
		return next, fmt.Errorf("run zones: %w", err)
	}
	s.publish(ctx, sends)
	return next, nil
}

var _ clock.Stepper = (*Service)(nil)

func (s *Service) publish(ctx context.Context, sends []outgoing) {
	for _, o := range sends {
		pctx, cancel := context.WithTimeout(ctx, 10*time.Second)
		err := s.o.MQTT.Publish(pctx, o.topic, 1, false, o.payload)
		cancel()
		c := o.cmd
		if o.stop {
			if err != nil {
				s.log.Warn("stop publish failed; it will be retried", "zone", c.Zone, "id", c.ID, "attempt", c.StopAttempts, "err", err)
				continue
			}
			s.log.Warn("stop sent", "zone", c.Zone, "id", c.ID, "reason", c.StopReason, "attempt", c.StopAttempts)
			s.emit(Event{Time: s.o.Clock.Now(), Site: s.siteOf(c.Zone), Zone: c.Zone, Kind: EventStop, Command: &c, Text: c.StopReason})
			continue
		}
		if err != nil {
			s.log.Warn("command publish failed; it will be retried", "site", c.Source, "zone", c.Zone, "id", c.ID, "attempt", c.Attempts, "err", err)
			continue
		}
		s.log.Info("command sent", "site", s.siteOf(c.Zone), "zone", c.Zone, "id", c.ID, "minutes", c.Minutes, "start", c.Start,
			"cycle", c.Cycle, "cycles", c.Cycles, "attempt", c.Attempts, "basis", c.Reason.Basis,
			"depletion_mm", precision.Round(precision.MM, c.Reason.DepletionMM), "trigger_mm", precision.Round(precision.MM, c.Reason.TriggerMM))
		s.emit(Event{Time: s.o.Clock.Now(), Site: s.siteOf(c.Zone), Zone: c.Zone, Kind: EventSent, Command: &c})
	}
}

func (s *Service) siteOf(zone string) string {
	for _, site := range s.sites {
		for _, ref := range site.zones {
			if ref.id == zone {
				return site.id
			}
		}
	}
	return ""
}

// tick runs one scheduling pass at now in one transaction: plan the due
// runs, then send, re-send, cancel or expire ledger commands as due, raise
// or clear stale-ET alerts and prune old ledger entries. It returns when to
// tick next and the commands to publish now that the pass has committed
// (Run publishes them).
func (s *Service) tick(now time.Time) (time.Time, []outgoing, error) {
	var sends []outgoing
	var events []Event
	next := now.Add(time.Hour)
	s.mu.Lock()
	resumeAt := s.resumeAt
	s.mu.Unlock()
	err := s.o.DB.Update(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		for _, site := range s.sites {
			ledger, err := loadLedger(b, site.id)
			if err != nil {
				return err
			}
			holds, err := loadHolds(b, site.id)
			if err != nil {
				return err
			}
			recs := map[string]*zoneRecord{}
			var inputs []controllers.ZoneInput
			for _, ref := range site.zones {
				zr, err := s.loadZone(b, ref)
				if err != nil {
					return err
				}
				recs[ref.id] = &zr
				inputs = append(inputs, controllers.ZoneInput{Zone: ref.z, State: &recs[ref.id].State})
			}

			d := controllers.Decide(now, controllers.Input{Zones: inputs, Sources: site.sources, Ledger: ledger, Holds: holds, Resume: resumeAt,
				Forecast: s.forecastOf(site.id), Meters: s.meterInputs(site.id)})
			s.noteForecast(site.id, d)
			if d.Wake.Before(next) {
				next = d.Wake
			}
			for _, a := range d.Actions {
				o, ev, err := s.carryOut(tx, b, site.id, a, now)
				if err != nil {
					return err
				}
				if o != nil {
					sends = append(sends, *o)
				}
				if ev.Kind != "" {
					events = append(events, ev)
				}
			}
			evs, err := s.noteZones(tx, b, site, recs, d.Skips, now)
			if err != nil {
				return err
			}
			events = append(events, evs...)
			if evs, err = s.noteFlows(tx, site.id, d.Flows, ledger, now); err != nil {
				return err
			}
			events = append(events, evs...)
			for i := range ledger {
				c := &ledger[i]
				if !c.State.Open() && !c.MayRun() && !c.EndedAt.IsZero() && now.Sub(c.EndedAt) > s.o.LedgerRetention {
					if err := b.ledger.Delete(key(site.id, c.ID)); err != nil {
						return fmt.Errorf("prune %s: %w", c.ID, err)
					}
				}
			}
		}
		return nil
	})
	if err != nil {
		return now.Add(10 * time.Second), nil, fmt.Errorf("tick: %w", err)
	}
	for _, e := range events {
		s.emit(e)
	}
	for _, o := range sends {
		if o.topic == "" {
			s.log.Error("command for an unconfigured zone not sent", "zone", o.cmd.Zone, "id", o.cmd.ID)
		}
	}
	if !next.After(now) {
		next = now.Add(time.Second)
	}
	return next, sends, nil
}

// carryOut carries out one action of the decision function in tx: the
// command is stored as the action left it, counted, written to the store,
// alerted as the action's concern asks, and returned as a message to publish
// once tx has commits (send, resend, stop). Adapters execute; the decision
// was made in controllers.Decide.
func (s *Service) carryOut(tx *bbolt.Tx, b buckets, site string, a controllers.Action, now time.Time) (*outgoing, Event, error) {
	c := a.Command
	ref := s.zones[site+"/"+c.Zone]
	ev := Event{Time: now, Site: site, Zone: c.Zone, Command: &c, Text: a.Reason}
	if err := putCommand(b, site, &c); err != nil {
		return nil, ev, err
	}
	var out *outgoing
	switch a.Kind {
	case controllers.ActPlan:
		ev.Kind = EventPlanned
		s.log.Info("run planned", "site", site, "zone", c.Zone, "id", c.ID, "start", c.Start, "minutes", c.Minutes,
			"cycle", c.Cycle, "cycles", c.Cycles, "basis", c.Reason.Basis, "reason", a.Reason)
	case controllers.ActSend, controllers.ActResend:
		outcome := "sent"
		if a.Kind == controllers.ActResend {
			outcome = "resent"
		}
		o, err := s.queue(tx, site, ref, &c, commandMessage(&c), outcome, now)
		if err != nil {
			return nil, ev, err
		}
		o.first = a.Kind == controllers.ActSend
		out = &o
		ev.Kind = "" // reported by publish once it has gone out
	case controllers.ActStop:
		outcome := "stop_sent"
		if c.StopAttempts > 1 {
			outcome = "stop_resent"
		}
		o, err := s.queue(tx, site, ref, &c, stopMessage(&c), outcome, now)
		if err != nil {
			return nil, ev, err
		}
		o.stop = true
		out = &o
		ev.Kind = ""
		if a.Concern == controllers.ConcernValveOpen {
			s.log.Error("valve may be open: stop not confirmed", "site", site, "zone", c.Zone, "id", c.ID, "attempt", c.StopAttempts, "reason", a.Reason)
			if err := s.raise(tx, site, c.Zone, valveOpenAlert(&c, a.Reason), now); err != nil {
				return nil, ev, err
			}
		}
	case controllers.ActCancel:
		s.m.command(site, c.Zone, "cancelled")
		if err := s.enqueue(tx, commandPoint(site, &c, "cancelled", now)); err != nil {
			return nil, ev, err
		}
		ev.Kind = EventCancelled
	case controllers.ActExpire:
		policy := controllers.DefaultPolicy
		if ref != nil {
			policy = ref.z.Policy
		}
		s.m.command(site, c.Zone, "expired")
		s.log.Warn("command expired, not credited", "site", site, "zone", c.Zone, "id", c.ID, "attempts", c.Attempts, "note", c.Note)
		if err := s.enqueue(tx, commandPoint(site, &c, "expired", now)); err != nil {
			return nil, ev, err
		}
		if err := s.raise(tx, site, c.Zone, noReportAlert(&c, c.Note, policy), now); err != nil {
			return nil, ev, err
		}
		ev.Kind = EventExpired
	}
	return out, ev, nil
}

// noteZones records, per zone of site, a changed skip reason (logged once)
// and the raising or clearing of the stale-ET alert.
func (s *Service) noteZones(tx *bbolt.Tx, b buckets, site *siteRef, recs map[string]*zoneRecord, skips []controllers.Skip, now time.Time) ([]Event, error) {
	var events []Event
	skipped := map[string]controllers.Skip{}
	for _, sk := range skips {
		skipped[sk.Zone] = sk
	}
	for _, ref := range site.zones {
		zr := recs[ref.id]
		sk := skipped[ref.id]
		changed := false
		if sk.Reason != zr.Skip {
			zr.Skip, changed = sk.Reason, true
			if sk.Reason != "" {
				lvl := slog.LevelInfo
				if sk.Alert {
					lvl = slog.LevelWarn
				}
				s.log.Log(context.Background(), lvl, "zone not watered", "site", site.id, "zone", ref.id, "reason", sk.Reason)
				events = append(events, Event{Time: now, Site: site.id, Zone: ref.id, Kind: EventSkip, Text: sk.Reason})
			}
		}
		if stale := s.staleDue(ref.z, zr, now); stale != zr.StaleAlert {
			zr.StaleAlert, changed = stale, true
			a := staleAlert(ref.z, &zr.State, now, s.startedAt(now))
			text := a.message
			if !stale {
				text = "valid ET; zone active"
			}
			s.log.Log(context.Background(), map[bool]slog.Level{true: slog.LevelWarn, false: slog.LevelInfo}[stale], "zone ET alert", "site", site.id, "zone", ref.id, "raised", stale, "text", text)
			var err error
			if stale {
				err = s.raise(tx, site.id, ref.id, a, now)
			} else {
				err = s.clear(tx, site.id, ref.id, alert.KindZoneETStale, now, text, true)
			}
			if err != nil {
				return nil, err
			}
			events = append(events, Event{Time: now, Site: site.id, Zone: ref.id, Kind: EventAlert, Text: text})
		}
		if changed {
			if err := putZone(b, site.id, ref.id, zr); err != nil {
				return nil, err
			}
		}
	}
	return events, nil
}

// queue records one publish of c (its command or its stop, msg) in tx:
// counted under outcome, stored as a valve_command point, and returned as
// the message to publish once tx has committed.
func (s *Service) queue(tx *bbolt.Tx, site string, ref *zoneRef, c *controllers.Command, msg any, outcome string, now time.Time) (outgoing, error) {
	payload, err := json.Marshal(msg)
	if err != nil {
		return outgoing{}, fmt.Errorf("encode %s %s: %w", outcome, c.ID, err)
	}
	o := outgoing{payload: payload, cmd: *c}
	if ref != nil {
		o.topic = ref.cmdTopic
	}
	s.m.command(site, c.Zone, outcome)
	if err := s.enqueue(tx, commandPoint(site, c, outcome, now)); err != nil {
		return outgoing{}, err
	}
	return o, nil
}

// onReport handles a valve report: in one transaction the ledger entry
// changes, reported water is credited to the zone's balance, and the report
// (and credit step) points are enqueued. The message is acknowledged only
// after the commit, or when it can never be applied (malformed, unknown).
func (s *Service) onReport(ref *zoneRef) func(mqtt.Message) {
	return func(m mqtt.Message) {
		if !s.fromTopic(m, ref.reportTopic, "valve report", ref.site) {
			s.m.badReports.WithLabelValues(ref.site, ref.id).Inc()
			return
		}
		now := s.o.Clock.Now()
		r, err := DecodeReport(m.Payload)
		if err != nil {
			s.m.badReports.WithLabelValues(ref.site, ref.id).Inc()
			s.log.Warn("valve report refused", "site", ref.site, "zone", ref.id, "topic", m.Topic, "err", err)
			m.Ack()
			return
		}
		if err := s.applyReport(ref, r, now); err != nil {
			// Not acknowledged: the broker redelivers it.
			s.log.Error("valve report not stored", "site", ref.site, "zone", ref.id, "id", r.ID, "err", err)
			return
		}
		m.Ack()
		s.poke()
	}
}

// fromTopic reports whether m arrived on want, the one topic the
// configuration names for it. A broker delivers only what a subscription
// matches, but the handlers must not depend on how subscriptions are routed:
// a message from any other topic is logged, acknowledged (it can never
// apply) and dropped.
func (s *Service) fromTopic(m mqtt.Message, want, what, site string) bool {
	if m.Topic == want {
		return true
	}
	s.log.Warn(what+" refused: not on its configured topic", "site", site, "topic", m.Topic, "want", want)
	m.Ack()
	return false
}

// applyReport applies one decoded report at now in one transaction. Reports
// that cannot apply (unknown id, contradiction) are logged and counted, not
// returned as errors; only storage errors are.
func (s *Service) applyReport(ref *zoneRef, r controllers.Report, now time.Time) error {
	var events []Event
	var level controllers.State
	credited := false
	err := s.o.DB.Update(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		c, ok, err := getCommand(b, ref.site, r.ID)
		if err != nil {
			return err
		}
		if !ok || c.Zone != ref.id {
			s.m.badReports.WithLabelValues(ref.site, ref.id).Inc()
			s.log.Warn("valve report for an unknown command", "site", ref.site, "zone", ref.id, "id", r.ID, "state", r.State)
			return nil
		}
		out, err := c.Apply(r, now, ref.z.Policy)
		if err != nil {
			s.m.badReports.WithLabelValues(ref.site, ref.id).Inc()
			s.log.Warn("valve report refused", "site", ref.site, "zone", ref.id, "id", r.ID, "err", err)
			return nil
		}
		if err := s.enqueue(tx, reportPoint(ref.site, ref.id, r, out, now)); err != nil {
			return err
		}
		cc := c
		events = append(events, Event{Time: now, Site: ref.site, Zone: ref.id, Kind: EventReport, Command: &cc, Text: string(r.State)})
		switch {
		case out.Duplicate:
			s.m.command(ref.site, ref.id, "duplicate")
		case r.State == controllers.ReportFailed:
			s.m.command(ref.site, ref.id, "failed")
			s.log.Warn("valve run failed", "site", ref.site, "zone", ref.id, "id", r.ID, "reason", r.Reason, "minutes_run", r.MinutesRun)
			if err := s.raise(tx, ref.site, ref.id, failedAlert(&c, r), now); err != nil {
				return err
			}
		case r.State == controllers.ReportFinished:
			s.m.command(ref.site, ref.id, "reported")
		case r.State == controllers.ReportStopped:
			s.m.command(ref.site, ref.id, "stopped")
			s.log.Info("valve stopped", "site", ref.site, "zone", ref.id, "id", r.ID, "minutes_run", c.MinutesRun, "note", c.Note)
			if c.StopAt.IsZero() {
				// Closed at the controller without a stop asked for: a
				// flow alarm, a stop pressed in the field.
				if err := s.raise(tx, ref.site, ref.id, stoppedAlert(&c, r), now); err != nil {
					return err
				}
			}
		}
		if out.Overrun != "" {
			s.log.Warn("valve report over the commanded run", "site", ref.site, "zone", ref.id, "id", r.ID, "overrun", out.Overrun, "credit_mm", out.CreditMM)
			if err := s.raise(tx, ref.site, ref.id, overrunAlert(&c, out), now); err != nil {
				return err
			}
		}
		if out.Credit {
			if err := s.clearAfterReport(tx, ref, &c, r, out, now); err != nil {
				return err
			}
		}
		if out.Changed {
			if err := putCommand(b, ref.site, &c); err != nil {
				return err
			}
		}
		if !out.Credit {
			return nil
		}
		zr, err := s.loadZone(b, ref)
		if err != nil {
			return err
		}
		step, err := ref.z.Credit(&zr.State, c.ID, out.CreditMM, now)
		if err != nil {
			return err
		}
		ref.z.NoteIrrigation(&zr.State, out.CreditMM, now)
		if err := putZone(b, ref.site, ref.id, &zr); err != nil {
			return err
		}
		if err := s.enqueue(tx, stepPoint(ref.site, step)); err != nil {
			return err
		}
		level, credited = zr.State, true
		events = append(events, Event{Time: now, Site: ref.site, Zone: ref.id, Kind: EventCredited, Command: &cc, Step: &step})
		return nil
	})
	if err != nil {
		return fmt.Errorf("apply report %s: %w", r.ID, err)
	}
	if credited {
		s.m.setLevels(ref, &level, now)
		s.log.Info("irrigation credited", "site", ref.site, "zone", ref.id, "id", r.ID, "depletion_mm", level.Depletion)
	}
	for _, e := range events {
		s.emit(e)
	}
	return nil
}

// onHold applies hold requests of a site and answers them.
func (s *Service) onHold(site *siteRef) func(mqtt.Message) {
	return func(m mqtt.Message) {
		if !s.fromTopic(m, config.HoldTopic(s.o.TopicPrefix, site.id), "hold request", site.id) {
			return
		}
		now := s.o.Clock.Now()
		reply := s.applyHold(site, m.Payload, now)
		b, err := json.Marshal(reply)
		if err == nil {
			ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
			err = s.o.MQTT.Publish(ctx, config.HoldReplyTopic(s.o.TopicPrefix, site.id), 1, false, b)
			cancel()
		}
		if err != nil {
			s.log.Warn("hold reply not published", "site", site.id, "err", err)
		}
		m.Ack()
		s.poke()
	}
}

// applyHold applies a hold request (as received on the hold topic) at now
// and returns the reply. Planned commands of the held zones are cancelled,
// and a stop is requested for their sent, accepted and started ones, in the
// same transaction.
func (s *Service) applyHold(site *siteRef, payload []byte, now time.Time) HoldReply {
	req, err := DecodeHoldRequest(payload)
	if err != nil {
		s.log.Warn("hold request refused", "site", site.id, "err", err)
		return HoldReply{OK: false, Error: err.Error()}
	}
	reply := HoldReply{ID: req.ID, Zone: req.Zone, Action: req.Action}
	if req.Zone != "" && s.zones[site.id+"/"+req.Zone] == nil {
		reply.Error = fmt.Sprintf("zone: no zone %q in site %s", req.Zone, site.id)
		return reply
	}
	rec := holdRecord{Reason: req.Reason}
	switch req.Action {
	case "hold":
		if req.Hours == 0 {
			rec.Forever = true
		} else {
			rec.Until = now.Add(time.Duration(req.Hours * float64(time.Hour)))
		}
		if rec.Reason == "" {
			rec.Reason = "manual hold"
		}
	case "rain_delay":
		rec.Until = now.Add(time.Duration(req.Hours * float64(time.Hour)))
		if rec.Reason == "" {
			rec.Reason = fmt.Sprintf("rain delay %g h", req.Hours)
		}
	}
	var events []Event
	err = s.o.DB.Update(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		k := key(site.id, req.Zone)
		if req.Action == "release" {
			if err := b.holds.Delete(k); err != nil {
				return err
			}
			return nil
		}
		if err := putJSON(b.holds, k, rec); err != nil {
			return err
		}
		ledger, err := loadLedger(b, site.id)
		if err != nil {
			return err
		}
		for i := range ledger {
			c := &ledger[i]
			if !c.State.Open() || (req.Zone != "" && c.Zone != req.Zone) {
				continue
			}
			if c.State != controllers.Planned {
				// Sent, accepted or started: the valve may be open. Ask for
				// a stop; the scheduler publishes it right after this commit.
				ok, err := c.RequestStop(now, rec.Reason)
				if err != nil {
					return err
				}
				if ok {
					if err := putCommand(b, site.id, c); err != nil {
						return err
					}
					s.log.Warn("stop requested for a sent command", "site", site.id, "zone", c.Zone, "id", c.ID, "state", c.State, "reason", rec.Reason)
				}
				continue
			}
			if err := c.Cancel(now, rec.Reason); err != nil {
				return err
			}
			s.m.command(site.id, c.Zone, "cancelled")
			if err := putCommand(b, site.id, c); err != nil {
				return err
			}
			if err := s.enqueue(tx, commandPoint(site.id, c, "cancelled", now)); err != nil {
				return err
			}
			cc := *c
			events = append(events, Event{Time: now, Site: site.id, Zone: c.Zone, Kind: EventCancelled, Command: &cc, Text: rec.Reason})
		}
		return nil
	})
	if err != nil {
		reply.Error = "not stored: " + err.Error()
		s.log.Error("hold not stored", "site", site.id, "err", err)
		return reply
	}
	reply.OK = true
	if !rec.Forever && req.Action != "release" {
		u := rec.Until.UTC()
		reply.Until = &u
	}
	s.log.Info("hold applied", "site", site.id, "zone", req.Zone, "action", req.Action, "until", reply.Until, "reason", rec.Reason)
	events = append(events, Event{Time: now, Site: site.id, Zone: req.Zone, Kind: EventHold, Text: req.Action + ": " + rec.Reason})
	for _, e := range events {
		s.emit(e)
	}
	return reply
}

// ZoneStatus is a zone's balance at one moment, for summaries and tests.
type ZoneStatus struct {
	Site, Zone string
	State      controllers.State
	Levels     controllers.Levels
}

// Status returns every zone's state and levels at now.
func (s *Service) Status(now time.Time) ([]ZoneStatus, error) {
	var out []ZoneStatus
	err := s.o.DB.View(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		for _, site := range s.sites {
			for _, ref := range site.zones {
				zr, err := s.loadZone(b, ref)
				if err != nil {
					return err
				}
				out = append(out, ZoneStatus{Site: site.id, Zone: ref.id, State: zr.State, Levels: ref.z.LevelsAt(&zr.State, now)})
			}
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("zones status: %w", err)
	}
	return out, nil
}

// Ledger returns the commands of a site, ordered by id.
func (s *Service) Ledger(site string) ([]controllers.Command, error) {
	var out []controllers.Command
	err := s.o.DB.View(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		out, err = loadLedger(b, site)
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("zones ledger: %w", err)
	}
	return out, nil
}
