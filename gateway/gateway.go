// Package gateway composes the live gateway: MQTT intake, the hour pipeline,
// and the components that plug into it (store, zone balance, alerts). This
// file is the one place where the parts are wired together.
package gateway

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"slices"
	"sync"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"go.etcd.io/bbolt"

	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/ingest"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/quality"
	"etpulse/gateway/store"
	"etpulse/gateway/zones"
	"etpulse/hourly"
)

// Service is a background loop owned by the gateway (store drain, zone
// scheduler, alert publisher). Run returns when ctx is cancelled; a non-nil
// error other than ctx's stops the whole gateway.
type Service interface {
	Run(ctx context.Context) error
}

// Flusher is a Service that has work to finish at shutdown (e.g. an outbox to
// drain). Flush is called after intake and every Service have stopped, with
// a context bounded by Deps.FlushTimeout.
type Flusher interface {
	Flush(ctx context.Context) error
}

// Broker is the MQTT connection the gateway uses.
type Broker interface {
	mqtt.Publisher
	mqtt.Subscriber
}

// Starter is a stepped Service (a clock.Stepper) with set-up to do before
// its first pass, e.g. subscriptions. A gateway run by RunStepped calls Start
// instead of Run.
type Starter interface {
	Start(ctx context.Context) error
}

// Components are the parts that plug into the pipeline. The caller may pass
// some in Deps (e.g. the demo's table printer); New adds the configured ones.
type Components struct {
	Handlers  []pipeline.HourHandler    // called inside each hour's closing transaction, in order
	Observers []pipeline.SampleObserver // see every accepted sample
	Gate      pipeline.QualityGate      // optional
	Services  []Service                 // background loops, run until shutdown
}

// Deps are the gateway's dependencies, all injected.
type Deps struct {
	Logger     *slog.Logger          // nil discards
	Registerer prometheus.Registerer // nil: metrics not registered
	Gatherer   prometheus.Gatherer   // the registry behind Registerer, for a metrics endpoint; may be nil
	// Clock is the gateway's time and its waits; nil means clock.Real.
	Clock clock.Clock
	DB    *bbolt.DB // the state file (state.Open); the caller closes it after Run
	MQTT  Broker    // the broker connection; the caller closes it after Run

	Components

	// OnRecord, when set, is called with each record after it is published.
	OnRecord func(hourly.Record)
	// OnZoneEvent, when set, is called with each zone event (command sent,
	// report credited, hold, alert) of the configured zones.
	OnZoneEvent func(zones.Event)
	// QueueSize bounds received messages not yet stored; 0 means 1024.
	QueueSize int
	// FlushTimeout bounds the Flushers at shutdown; 0 means 10s.
	FlushTimeout time.Duration
}

// Gateway is the composed live gateway.
type Gateway struct {
	cfg    *config.Config
	deps   Deps
	log    *slog.Logger
	router *ingest.Router
	pipe   *pipeline.Pipeline
	comp   Components
	queue  chan mqtt.Message

	handled   atomic.Uint64
	emitted   atomic.Uint64
	published atomic.Uint64
	kick      chan struct{} // wakes the record publisher
	pubMu     sync.Mutex    // guards pub: a record goes out once (publish.go)
	pubWG     sync.WaitGroup
	pub       recordPublisher
	ready     chan struct{}
	alerts    *quality.Monitor
	pause     *intakePause // intake held on an unwritable state file
	alive     atomic.Int64 // real time (unix ns) the intake loop last went round
	stepped   bool         // RunStepped: no pass waits on the clock

	progMu   sync.Mutex
	progress chan struct{} // closed when Handled, Emitted or Published grows; nil until asked for

	retained *statePublisher // retained station and zone state (state_publish.go)
	jr       *journalIntake  // the journal; nil when batches go straight into the state file (journal.go)
	recent   recentSeen      // sensors heard in the journal since its last checkpoint (journal.go)
}

// New composes the gateway for cfg. It does not start anything.
func New(cfg *config.Config, deps Deps) (*Gateway, error) {
	if deps.DB == nil {
		return nil, errors.New("new gateway: no state database")
	}
	if deps.Logger == nil {
		deps.Logger = slog.New(slog.DiscardHandler)
	}
	deps.Clock = clock.Or(deps.Clock)
	cfg = withTopicPrefix(cfg)
	if deps.QueueSize <= 0 {
		deps.QueueSize = 1024
	}
	if deps.FlushTimeout <= 0 {
		deps.FlushTimeout = 10 * time.Second
	}
	router, err := ingest.NewRouter(cfg)
	if err != nil {
		return nil, fmt.Errorf("new gateway: %w", err)
	}
	g := &Gateway{cfg: cfg, deps: deps, log: deps.Logger, router: router, queue: make(chan mqtt.Message, deps.QueueSize),
		kick: make(chan struct{}, 1), ready: make(chan struct{}),
		pub: recordPublisher{ctx: context.Background(), window: make(chan struct{}, recordWindow),
			failed: make(chan struct{}, 1), flight: map[recordKey]bool{}}}
	comp := deps.Components
	comp.Handlers = append([]pipeline.HourHandler(nil), comp.Handlers...)
	comp.Observers = append([]pipeline.SampleObserver(nil), comp.Observers...)
	comp.Services = append([]Service(nil), comp.Services...)

	// ---- Components wiring: the store, zone and alerts work add their parts
	// here (an HourHandler runs inside the closing transaction; a Service runs
	// until shutdown). g.pipe is set below; reach it from closures only.

	// Store: the outbox records each hour inside its closing transaction and
	// is the Enqueuer of the other parts; the writer drains it to the server.
	outbox, writer, err := store.Setup(deps.DB, cfg.Store, deps.Logger.With("component", "store"), deps.Registerer, deps.Clock.Now)
	if err != nil {
		return nil, fmt.Errorf("new gateway: %w", err)
	}
	comp.Handlers = append(comp.Handlers, outbox)
	comp.Services = append(comp.Services, outbox.History())
	if writer != nil {
		comp.Services = append(comp.Services, writer)
	}

	// Alerts: drift and fault checks on samples and closed hours, the quality
	// gate, and the metrics and health server (gateway/alerts.go); the
	// intake pause on an unwritable state file alerts through the monitor.
	if g.pause, err = newIntakePause(deps.Logger.With("component", "intake"), deps.Registerer, deps.DB.Path(),
		cfg.Alerts.TopicPrefix, siteIDs(cfg), deps.MQTT); err != nil {
		return nil, fmt.Errorf("new gateway: %w", err)
	}
	if g.alerts, err = setupAlerts(cfg, deps, outbox, g.pause, &comp); err != nil {
		return nil, fmt.Errorf("new gateway: %w", err)
	}
	g.pause.alerts = g.alerts

	// Zones: the balance steps inside each closing hour's transaction; the
	// scheduler sends valve commands and raises its alerts through the
	// alert monitor. Skipped when the caller passed its own zones service in
	// Deps.Components.
	if err := wireZones(cfg, deps, outbox, g.alerts, &comp); err != nil {
		return nil, fmt.Errorf("new gateway: %w", err)
	}
	g.retained = wireStatePublisher(cfg, deps, &comp)
	// ---- end of components wiring ----

	g.comp = comp
	g.pipe, err = pipeline.New(cfg, pipeline.Options{
		DB: deps.DB, Logger: deps.Logger.With("component", "pipeline"), Registerer: deps.Registerer,
		Handlers: comp.Handlers, Observers: comp.Observers, Gate: comp.Gate,
	})
	if err != nil {
		return nil, fmt.Errorf("new gateway: %w", err)
	}
	if err := g.resumeReadingChecks(); err != nil {
		return nil, fmt.Errorf("new gateway: %w", err)
	}
	if err := g.attachStatus(); err != nil { // status pages (status_wiring.go)
		return nil, fmt.Errorf("new gateway: %w", err)
	}
	if err := g.attachReport(); err != nil { // the morning report (report_wiring.go)
		return nil, fmt.Errorf("new gateway: %w", err)
	}
	return g, nil
}

// withTopicPrefix resolves topic_prefix and alerts.topic_prefix of a
// configuration that left them empty (not passed through config.Load),
// returning a shallow copy, so every part reads the same prefix.
func withTopicPrefix(cfg *config.Config) *config.Config {
	if cfg.Alerts.TopicPrefix != "" && cfg.TopicPrefix != "" {
		return cfg
	}
	c := *cfg
	c.TopicPrefix = cfg.Prefix()
	if c.Alerts.TopicPrefix == "" {
		c.Alerts.TopicPrefix = c.TopicPrefix
	}
	return &c
}

// Pipeline returns the gateway's hour pipeline (e.g. for LastSeen).
func (g *Gateway) Pipeline() *pipeline.Pipeline { return g.pipe }

// Ready is closed once Run has subscribed to every sensor topic.
func (g *Gateway) Ready() <-chan struct{} { return g.ready }

// Handled returns how many MQTT messages have been fully handled: durable
// (in the journal, or in the state file when the journal is off) and
// acknowledged (or rejected), and the hours they closed committed.
func (g *Gateway) Handled() uint64 { return g.handled.Load() }

// Emitted returns how many hourly records (first emissions and revisions)
// have been committed; Published how many of them have been published.
func (g *Gateway) Emitted() uint64 { return g.emitted.Load() }

// Published returns how many hourly records have been published.
func (g *Gateway) Published() uint64 { return g.published.Load() }

// Progress returns a channel closed the next time Handled, Emitted or
// Published grows: a caller waiting for the gateway to catch up reads the
// counters after taking the channel and sleeps on it.
func (g *Gateway) Progress() <-chan struct{} {
	g.progMu.Lock()
	defer g.progMu.Unlock()
	if g.progress == nil {
		g.progress = make(chan struct{})
	}
	return g.progress
}

// progressed wakes the callers waiting on Progress.
func (g *Gateway) progressed() {
	g.progMu.Lock()
	defer g.progMu.Unlock()
	if g.progress != nil {
		close(g.progress)
		g.progress = nil
	}
}

// Run subscribes, runs intake and every Service until ctx is cancelled, then
// shuts down in order: stop intake (the last batch is stored, acknowledged
// and its hours published), stop the services (no new commands), flush, and
// return. Messages received but not stored are not acknowledged, so the
// broker redelivers them to the next run. The hour pipeline and every
// stepped service (a clock.Stepper) run their passes on Deps.Clock.
func (g *Gateway) Run(ctx context.Context) error { return g.run(ctx, false) }

// RunStepped is Run for a caller that drives time itself (the demo, tests):
// nothing waits on the clock; intake stores messages as they come and the
// caller runs the passes with Step. Stepped services are started (Starter),
// not run.
func (g *Gateway) RunStepped(ctx context.Context) error { return g.run(ctx, true) }

// Step runs the gateway's passes at now, in order, for a gateway run by
// RunStepped: the hour pipeline closes the hours due and publishes every
// pending record, then each stepped service runs once (RunOnce), in the
// order they were composed (the alert monitor before the zone scheduler).
func (g *Gateway) Step(ctx context.Context, now time.Time) error {
	g.closeHours(now)
	g.publishPending(ctx)
	g.waitPublished(ctx)
	for _, s := range g.comp.Services {
		if st, ok := s.(clock.Stepper); ok {
			if _, err := st.RunOnce(ctx, now); err != nil {
				return fmt.Errorf("step %T: %w", s, err)
			}
		}
	}
	return nil
}

func (g *Gateway) run(ctx context.Context, stepped bool) error {
	g.stepped = stepped
	svcCtx, stopServices := context.WithCancel(context.WithoutCancel(ctx))
	defer stopServices()
	intakeCtx, stopIntake := context.WithCancel(ctx)
	defer stopIntake()

	// Subscribe first: a resumed persistent session delivers its queue at
	// once, and messages for topics not yet subscribed wait unhandled.
	for _, f := range g.router.Filters() {
		if err := g.deps.MQTT.Subscribe(f, 1, func(m mqtt.Message) {
			select {
			case g.queue <- m:
			case <-intakeCtx.Done(): // not acknowledged: redelivered next run
			}
		}); err != nil {
			return fmt.Errorf("run gateway: subscribe %s: %w", f, err)
		}
	}

	// Stepped by the caller: stepped services are only started; Step runs
	// their passes.
	isStepped := func(s Service) bool { _, ok := s.(clock.Stepper); return ok && stepped }
	for _, s := range g.comp.Services {
		if st, ok := s.(Starter); ok && isStepped(s) {
			if err := st.Start(svcCtx); err != nil {
				return fmt.Errorf("run gateway: start %T: %w", s, err)
			}
		}
	}
	fatal := make(chan error, len(g.comp.Services)+1)
	var svcWG sync.WaitGroup
	for _, s := range g.comp.Services {
		if isStepped(s) {
			continue
		}
		svcWG.Add(1)
		go func() {
			defer svcWG.Done()
			if err := s.Run(svcCtx); err != nil && svcCtx.Err() == nil {
				fatal <- fmt.Errorf("service %T: %w", s, err)
			}
		}()
	}

	g.log.Info("gateway running", "topics", len(g.router.Filters()), "stations", len(g.pipe.Stations()))
	close(g.ready)

	// Records are published from their own goroutine: publishing waits for
	// the broker's acknowledgement, which must never wait on intake.
	pubCtx, stopPublisher := context.WithCancel(context.WithoutCancel(ctx))
	defer stopPublisher()
	g.pubMu.Lock()
	g.pub.ctx = pubCtx // publishes under way end with the publisher
	g.pubMu.Unlock()
	pubDone := make(chan struct{})
	go func() {
		defer close(pubDone)
		g.publisher(pubCtx)
	}()
	g.kickPublisher() // records left pending by the previous run

	intakeDone := make(chan struct{})
	go func() {
		defer close(intakeDone)
		if err := g.intake(intakeCtx); err != nil {
			fatal <- err
		}
	}()

	var runErr error
	select {
	case <-ctx.Done():
	case runErr = <-fatal:
		g.log.Error("gateway stopping on error", "err", runErr)
	}
	stopIntake()
	<-intakeDone
	dctx, cancelDrain := context.WithTimeout(context.WithoutCancel(ctx), 5*time.Second)
	g.publishPending(dctx) // the last hours intake closed
	g.waitPublished(dctx)
	cancelDrain()
	stopPublisher()
	<-pubDone
	g.pubWG.Wait() // publishes under way end with pubCtx
	stopServices()
	svcWG.Wait()
	fctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), g.deps.FlushTimeout)
	defer cancel()
	var errs []error
	if runErr != nil {
		errs = append(errs, runErr)
	}
	for _, s := range g.comp.Services {
		if f, ok := s.(Flusher); ok {
			if err := f.Flush(fctx); err != nil {
				errs = append(errs, fmt.Errorf("flush %T: %w", s, err))
			}
		}
	}
	g.log.Info("gateway stopped", "handled", g.handled.Load())
	return errors.Join(errs...)
}

// maxBatch bounds the messages stored in one transaction.
const maxBatch = 512

// intake drains the queue in batches: route, store in one transaction, ack,
// close due hours, publish. It also wakes at the next silence deadline.
func (g *Gateway) intake(ctx context.Context) error {
	if g.jr = g.newJournalIntake(); g.jr != nil {
		defer g.closeJournal(ctx)
		if err := g.openJournal(ctx); err != nil {
			return err
		}
	}
	if err := g.startup(ctx); err != nil {
		return err
	}
	batch := make([]mqtt.Message, 0, maxBatch)
	idle := time.NewTimer(aliveEvery)
	defer idle.Stop()
	for {
		g.beat()
		idle.Reset(aliveEvery)
		batch = batch[:0]
		var wake <-chan time.Time
		if next := g.pipe.NextDeadline(); !next.IsZero() && !g.stepped {
			wake = g.deps.Clock.After(max(next.Sub(g.deps.Clock.Now()), 0))
		}
		ckpt, stopCkpt := g.checkpointTimer()
		select {
		case <-ctx.Done():
			return nil
		case m := <-g.queue:
			batch = append(batch, m)
		fill:
			for len(batch) < maxBatch {
				select {
				case m := <-g.queue:
					batch = append(batch, m)
				default:
					break fill
				}
			}
			if g.jr != nil {
				batch = g.gather(ctx, batch, wake)
			}
		case <-ckpt:
		case <-wake:
		case <-idle.C:
			stopCkpt()
			continue // a beat for Alive
		}
		stopCkpt()
		if err := g.step(ctx, batch, false); err != nil {
			return err
		}
	}
}

// aliveEvery is the longest an idle intake loop goes without a beat.
const aliveEvery = 10 * time.Second

// beat records that the intake loop is going round (Alive).
func (g *Gateway) beat() { g.alive.Store(time.Now().UnixNano()) }

// Alive returns the real time the intake loop last went round: at least
// every 10 s while idle, after every batch, and before every retry while
// paused (at most 30 s apart). Zero before Run. A systemd watchdog pings
// only while it is recent.
func (g *Gateway) Alive() time.Time {
	if ns := g.alive.Load(); ns != 0 {
		return time.Unix(0, ns)
	}
	return time.Time{}
}

// startup takes the messages the broker delivers as the session resumes (the
// queue of a persistent session arrives before every topic is subscribed, so
// topics subscribed first overtake the others) until the queue has been quiet
// for startupQuiet, and stores them in reading-time order.
func (g *Gateway) startup(ctx context.Context) error {
	var batch []mqtt.Message
	limit := time.After(startupMax)
gather:
	for len(batch) < 4*maxBatch {
		select {
		case m := <-g.queue:
			batch = append(batch, m)
		case <-time.After(startupQuiet):
			break gather
		case <-limit:
			break gather
		case <-ctx.Done():
			return nil
		}
	}
	if len(batch) == 0 {
		return nil
	}
	g.log.Info("resumed session", "messages", len(batch))
	return g.step(ctx, batch, true)
}

// Start-up gathering bounds, in real time.
const (
	startupQuiet = 100 * time.Millisecond
	startupMax   = 2 * time.Second
)

// step handles one batch (possibly empty: a timer wake-up).
func (g *Gateway) step(ctx context.Context, batch []mqtt.Message, byTime bool) error {
	now := g.deps.Clock.Now()
	var readings []ingest.Reading
	for _, m := range batch {
		rds, rejs := g.router.Route(m.Topic, m.Payload, now)
		site, station := "", ""
		if len(rds) > 0 {
			site, station = rds[0].Site, rds[0].Station
		} else if len(rejs) > 0 {
			site, station = rejs[0].Site, rejs[0].Station
		}
		g.pipe.CountMessage(site, station)
		for _, r := range rejs {
			g.pipe.Reject(now, r.Station, r)
		}
		readings = append(readings, rds...)
	}
	if byTime {
		slices.SortStableFunc(readings, func(a, b ingest.Reading) int { return a.Sample.Time.Compare(b.Sample.Time) })
	}
	if g.jr != nil {
		return g.stepJournalled(ctx, now, batch, readings)
	}
	emitted, stored, err := g.store(ctx, now, readings, len(batch))
	g.emitted.Add(uint64(emitted))
	if err != nil || !stored {
		return err // not acknowledged: redelivered next run
	}
	for _, m := range batch {
		if m.Ack != nil {
			m.Ack()
		}
	}
	g.closeHours(now)
	if emitted > 0 {
		g.kickPublisher()
	}
	g.handled.Add(uint64(len(batch)))
	g.progressed()
	return nil
}

// stepJournalled is step with the journal: the batch is journalled and
// acknowledged, its readings wait for a checkpoint unless one is due.
func (g *Gateway) stepJournalled(ctx context.Context, now time.Time, batch []mqtt.Message, readings []ingest.Reading) error {
	if len(batch) > 0 {
		stored, err := g.journal(ctx, now, batch)
		if err != nil || !stored {
			return err // not acknowledged: redelivered next run
		}
		// Heard before the acknowledgement: the broker's next messages (and
		// a simulated clock driven by them) must find the sensors heard.
		for i := range readings {
			readings[i].Arrived = now
			g.alerts.Heard(readings[i].Site, readings[i].Station, readings[i].Sample, now)
		}
		for _, m := range batch {
			if m.Ack != nil {
				m.Ack()
			}
		}
		if g.jr.since.IsZero() {
			g.jr.since = time.Now()
		}
		g.jr.pending = append(g.jr.pending, readings...)
		g.recent.note(readings, now)
	}
	if g.checkpointDue(now, readings) {
		if err := g.checkpoint(ctx, now); err != nil {
			if ctx.Err() != nil {
				return nil // the journal keeps them for the next start
			}
			return err
		}
	}
	g.closeHours(now)
	g.handled.Add(uint64(len(batch)))
	g.progressed()
	return nil
}

// store stores readings (from held messages) in the state file. A write the
// disk refuses (full, quota, I/O error: stateDiskFault) pauses intake: the
// messages stay unacknowledged, the pause is alerted and reported by
// /readyz and a metric, and the store is retried with a growing wait until
// it succeeds, which resumes intake. Another error is retried twice, then
// returned. stored is false when ctx ended first.
func (g *Gateway) store(ctx context.Context, now time.Time, readings []ingest.Reading, held int) (emitted int, stored bool, err error) {
	if len(readings) == 0 {
		return 0, true, nil
	}
	stored, err = g.persist(ctx, now, held, func(now time.Time) error {
		res, err := g.pipe.Ingest(now, readings)
		emitted += len(res.Records)
		g.logClosed(res.Records)
		return err
	})
	return emitted, stored, err
}

// persist runs write (a write of held messages to the state file or the
// journal) until it succeeds, pausing intake on a disk fault (see store).
// stored is false when ctx ended first.
func (g *Gateway) persist(ctx context.Context, now time.Time, held int, write func(now time.Time) error) (stored bool, err error) {
	failures, wait := 0, pauseFirstRetry
	for {
		err := write(now)
		if err == nil {
			g.pause.resume(g.deps.Clock.Now())
			return true, nil
		}
		var pause time.Duration
		if kind, ok := stateDiskFault(err); ok {
			pause, wait = wait, min(2*wait, pauseMaxRetry)
			g.pause.hold(now, kind, err, held, pause)
		} else {
			if failures == 2 {
				return false, fmt.Errorf("intake: store readings: %w", err)
			}
			failures++
			pause = time.Duration(failures) * 200 * time.Millisecond
			g.log.Error("storing readings failed; retrying", "err", err)
		}
		g.beat() // paused is alive
		select {
		case <-time.After(pause):
		case <-ctx.Done():
			return false, nil
		}
		now = g.deps.Clock.Now()
	}
}

// closeHours is the hour pipeline's pass at now: it closes the hours due
// (watermark, close grace, silence) and hands their records to the
// publisher. It returns the pipeline's next deadline.
func (g *Gateway) closeHours(now time.Time) time.Time {
	recs, err := g.pipe.Tick(now)
	if err != nil {
		g.log.Error("closing hours", "err", err)
	}
	g.logClosed(recs)
	if len(recs) > 0 {
		g.emitted.Add(uint64(len(recs)))
		g.progressed()
		g.kickPublisher()
	}
	return g.pipe.NextDeadline()
}

func (g *Gateway) kickPublisher() {
	select {
	case g.kick <- struct{}{}:
	default:
	}
}
