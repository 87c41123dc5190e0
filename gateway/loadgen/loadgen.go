// Package loadgen measures the live gateway under load: it runs the real
// gateway (pipeline, state file, outbox, alerts) in process against an MQTT
// broker on this machine, publishes simulated readings of up to 10,000
// stations as fast as the gateway takes them (or at a fixed rate) on a
// simulated clock so that hours close during the run, and reports
// throughput, CPU per message, latency from publication to the gateway's
// durable acknowledgement, record latency, the time to close one hour at
// every station, peak memory and bytes written per message. Before the
// gateway starts, the same publishers feed a bare subscriber on the same
// broker (the floor), and the summary gives the gateway's rate as a ratio of
// the floor's.
//
// Load goes only to this machine: the broker is started in process on
// 127.0.0.1, or given by the caller and refused unless its host is a
// loopback address.
package loadgen

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"runtime/pprof"
	"strings"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway"
	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
)

// Options configure a load run. Zero values take the defaults below.
type Options struct {
	// BrokerURL is a broker on this machine (tcp://127.0.0.1:PORT); empty
	// starts an embedded broker on a free loopback port.
	BrokerURL string
	Stations  int           // simulated stations; default 20
	Messages  int           // messages to publish at most; default 200000
	Duration  time.Duration // publishing time at most; default 60s, at most MaxDuration
	// Rate is the total publication rate in messages per second; 0 publishes
	// as fast as the gateway takes them (within Window).
	Rate float64
	// Interval is the simulated time between two readings of one sensor;
	// default 10s, 1s to 5m.
	Interval time.Duration
	// Publishers is the number of publishing connections; the stations are
	// shared among them. Default 4, at most Stations.
	Publishers int
	// Window bounds the messages published but not yet acknowledged by the
	// gateway; default 2000, at most 4096.
	Window int
	// Bad is the number of malformed messages injected on purpose, spread
	// over the run; the gateway must reject exactly these. Default 0.
	Bad int
	// Dir holds the run's state file (a temporary directory is made in it
	// and removed); empty means the system's temporary directory.
	Dir string
	// Progress receives a line every Every while publishing; nil for none.
	Progress io.Writer
	Every    time.Duration // default 5s
	Logger   *slog.Logger  // gateway logs; nil discards
	// BareDuration bounds the bare subscriber's phase (it also stops after
	// Messages); default 15s, at most MaxDuration.
	BareDuration time.Duration
	NoBare       bool // skip the bare phase
	// CPUProfile, when not nil, receives a CPU profile (pprof format) of
	// the gateway phase: from the first publication until the gateway has
	// caught up. The bare phase is not in it.
	CPUProfile io.Writer
	// MemProfile, when not nil, receives a heap profile (pprof format)
	// taken at the end of the gateway phase, after a garbage collection,
	// while the gateway still holds its state: in-use bytes are the live
	// heap then; allocated bytes cover the whole process.
	MemProfile io.Writer
	// PeakMemProfile, when not nil, receives a heap profile taken while
	// the gateway phase's heap (sampled every 100 ms) was at its highest,
	// within 10 %: its in-use bytes are those of the garbage collection
	// before that moment, the live data the heap grew from.
	PeakMemProfile io.Writer
}

// Defaults and limits of Options.
const (
	DefaultStations   = 20
	DefaultMessages   = 200000
	DefaultDuration   = 60 * time.Second
	MaxDuration       = 10 * time.Minute
	DefaultInterval   = 10 * time.Second
	DefaultPublishers = 4
	DefaultWindow     = 2000
	DefaultEvery      = 5 * time.Second
	DefaultBare       = 15 * time.Second
	// MaxStations is the largest network a run simulates.
	MaxStations   = 10_000
	maxWindow     = 4096 // under the embedded broker's 8192 in-flight messages per client
	maxMessages   = 50_000_000
	drainTimeout  = 60 * time.Second // after publishing, for the gateway to catch up
	startupSettle = 300 * time.Millisecond
	// lagSim is how far (simulated time) publishers may run ahead of the
	// slowest station the gateway has taken: under the 15-minute silence
	// alert and the silence close.
	lagSim = 10 * time.Minute
)

// Validate fills in the defaults and checks the options; Run calls it.
func (o *Options) Validate() error {
	def := func(v *int, d int) {
		if *v == 0 {
			*v = d
		}
	}
	def(&o.Stations, DefaultStations)
	def(&o.Messages, DefaultMessages)
	def(&o.Publishers, DefaultPublishers)
	def(&o.Window, DefaultWindow)
	if o.Duration == 0 {
		o.Duration = DefaultDuration
	}
	if o.Interval == 0 {
		o.Interval = DefaultInterval
	}
	if o.Every == 0 {
		o.Every = DefaultEvery
	}
	if o.BareDuration == 0 {
		o.BareDuration = DefaultBare
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	switch {
	case o.Stations < 1 || o.Stations > MaxStations:
		return fmt.Errorf("stations must be 1-%d, got %d", MaxStations, o.Stations)
	case o.Messages < 1 || o.Messages > maxMessages:
		return fmt.Errorf("messages must be 1-%d, got %d", maxMessages, o.Messages)
	case o.Duration < 0 || o.Duration > MaxDuration:
		return fmt.Errorf("duration must be at most %s, got %s", MaxDuration, o.Duration)
	case o.Rate < 0:
		return fmt.Errorf("rate must be >= 0 msg/s, got %g", o.Rate)
	case o.Interval < time.Second || o.Interval > 5*time.Minute || o.Interval%time.Second != 0:
		return fmt.Errorf("interval must be whole seconds from 1s to 5m, got %s", o.Interval)
	case o.Publishers < 1:
		return fmt.Errorf("publishers must be >= 1, got %d", o.Publishers)
	case o.Window < 1 || o.Window > maxWindow:
		return fmt.Errorf("window must be 1-%d messages, got %d", maxWindow, o.Window)
	case o.Bad < 0 || o.Bad >= o.Messages:
		return fmt.Errorf("bad must be 0 to messages-1, got %d", o.Bad)
	case o.Every < 0:
		return fmt.Errorf("progress interval must be >= 0, got %s", o.Every)
	case o.BareDuration < 0 || o.BareDuration > MaxDuration:
		return fmt.Errorf("bare phase duration must be 0 to %s, got %s", MaxDuration, o.BareDuration)
	}
	o.Publishers = min(o.Publishers, o.Stations)
	if _, err := newPlan(newFarm(o.Stations, "", o.Interval), *o); err != nil {
		return err
	}
	if o.BrokerURL != "" {
		if err := CheckLoopback(o.BrokerURL); err != nil {
			return err
		}
	}
	return nil
}

// Run performs one load run and returns its summary. It returns an error
// when the run could not be made (bad options, broker unreachable, gateway
// failure); an inconsistent result is a Summary whose Check fails.
func Run(ctx context.Context, o Options) (sum Summary, err error) {
	if err := o.Validate(); err != nil {
		return sum, fmt.Errorf("load: %w", err)
	}
	runID := fmt.Sprintf("%08x", rand.Uint32())
	f := newFarm(o.Stations, "corrigan-load-"+runID, o.Interval)
	pl, err := newPlan(f, o)
	if err != nil {
		return sum, fmt.Errorf("load: %w", err)
	}
	dir, err := os.MkdirTemp(o.Dir, "etpulse-load-")
	if err != nil {
		return sum, fmt.Errorf("load: %w", err)
	}
	defer os.RemoveAll(dir)

	url := o.BrokerURL
	sum.Broker = url
	if url == "" {
		srv, u, err := demo.StartBroker(false)
		if err != nil {
			return sum, fmt.Errorf("load: %w", err)
		}
		defer srv.Close()
		url, sum.Broker = u, "embedded"
	}

	if !o.NoBare {
		if sum.Bare, err = runBare(ctx, o, f, pl, url, runID); err != nil {
			return sum, fmt.Errorf("load: %w", err)
		}
		if ctx.Err() != nil {
			sum.StoppedBy = "signal"
			return sum, nil
		}
	}

	statePath := filepath.Join(dir, "state.db")
	clientID := "etpulse-load-" + runID
	cfg, err := config.Parse([]byte(f.configYAML(url, clientID, statePath)))
	if err != nil {
		return sum, fmt.Errorf("load: farm config: %w", err)
	}
	db, err := state.Open(statePath)
	if err != nil {
		return sum, fmt.Errorf("load: %w", err)
	}
	stuck := false // the gateway did not stop: it may hold the state file
	defer func() {
		if stuck {
			return
		}
		if cerr := db.Close(); cerr != nil && err == nil {
			err = fmt.Errorf("load: close state: %w", cerr)
		}
	}()

	reg := prometheus.NewRegistry()
	mo, err := mqtt.OptionsFromConfig(cfg.Broker)
	if err != nil {
		return sum, fmt.Errorf("load: %w", err)
	}
	// As the daemon: one handler worker keeps the broker's order. A clean
	// session leaves nothing behind on the broker after the run.
	mo.Workers, mo.CleanSession, mo.Registerer = 1, true, reg
	mo.Logger = o.Logger.With("component", "mqtt")
	runCtx, cancel := context.WithCancel(ctx)
	defer cancel()
	client, err := mqtt.Dial(runCtx, mo)
	if err != nil {
		return sum, fmt.Errorf("load: gateway connection: %w", err)
	}
	defer client.Close(time.Second)

	lag := max(1, int(lagSim/o.Interval))
	tr := newTracker(f, o.Publishers, lag, o.Window)
	clock := demo.NewClock(SimStart)
	g, err := gateway.New(cfg, gateway.Deps{
		Logger: o.Logger, Registerer: reg, Gatherer: reg, DB: db, MQTT: &tap{inner: client, t: tr},
		Clock: clock, OnRecord: tr.record,
	})
	if err != nil {
		return sum, fmt.Errorf("load: %w", err)
	}
	var runErr error
	runDone := make(chan struct{})
	go func() {
		defer close(runDone)
		runErr = g.Run(runCtx)
	}()
	var stopErr error
	stop := func() error { // cancel the gateway and wait a bounded time for it
		cancel()
		if !stuck && stopErr == nil {
			if stopErr = waitStopped(runDone, stopTimeout); stopErr != nil {
				stuck = true
			}
		}
		return stopErr
	}
	defer func() { // before the connection and the state file close
		if serr := stop(); serr != nil && err == nil {
			err = fmt.Errorf("load: %w", serr)
		}
	}()
	select {
	case <-g.Ready():
	case <-runDone:
		return sum, fmt.Errorf("load: gateway stopped: %w", runErr)
	case <-ctx.Done():
		if serr := stop(); serr != nil {
			return sum, fmt.Errorf("load: %w", serr)
		}
		return sum, fmt.Errorf("load: %w", ctx.Err())
	}

	pubs, err := dialPublishers(runCtx, url, runID, o.Publishers, f)
	if err != nil {
		return sum, fmt.Errorf("load: %w", err)
	}
	defer func() {
		for _, p := range pubs {
			p.close()
		}
	}()

	// The gateway starts by gathering a resumed session's messages until the
	// broker has been quiet for a moment (gateway.startup); publishing only
	// after that keeps its start-up out of the measurement.
	select {
	case <-time.After(startupSettle):
	case <-ctx.Done():
	}

	mem := startMemory(o.PeakMemProfile != nil)
	defer mem.stop()
	pubCtx, stopPub := context.WithTimeout(runCtx, o.Duration)
	defer stopPub()
	go func() { <-pubCtx.Done(); tr.stop() }()

	prog := startProgress(o.Progress, o.Every, tr, g, mem)
	sum.PeakRSSGatewayOnly = resetPeakRSS()
	io0 := readIO()
	if o.CPUProfile != nil {
		if err := pprof.StartCPUProfile(o.CPUProfile); err != nil {
			return sum, fmt.Errorf("load: cpu profile: %w", err)
		}
	}
	cpuProfiling := o.CPUProfile != nil
	stopCPUProfile := func() {
		if cpuProfiling {
			pprof.StopCPUProfile()
			cpuProfiling = false
		}
	}
	defer stopCPUProfile()
	cpu0 := ProcessCPU()
	began := tr.since()
	pubErr := runPublishers(pubCtx, stopPub, pubs, pl, tr, clock)
	switch {
	case pubErr != nil:
		sum.StoppedBy = "error"
	case ctx.Err() != nil:
		sum.StoppedBy = "signal"
	case pubCtx.Err() != nil:
		sum.StoppedBy = "duration"
	default:
		sum.StoppedBy = "messages"
	}
	stopPub()
	publishing := tr.since() - began
	prog.stop()

	// Let the gateway catch up: every published message acknowledged and
	// every committed record published.
	var total int64
	for _, p := range pubs {
		total += p.sent.Load()
	}
	drainErr := drain(ctx, g, uint64(total), runDone)
	stopCPUProfile()
	sum.collect(o, f, tr, g, reg, pubs, began, publishing)
	if cpu := ProcessCPU() - cpu0; cpu0 > 0 && sum.Acked > 0 {
		sum.CPUSeconds = cpu.Seconds()
		sum.CPUPerMsgUs = float64(cpu.Microseconds()) / float64(sum.Acked)
	}
	sum.written(io0, readIO())
	if err := sum.Check(); err != nil {
		sum.Problems = strings.Split(err.Error(), "\n")
	}
	sum.Consistent = len(sum.Problems) == 0
	if o.MemProfile != nil { // before the gateway stops and lets go of its state
		runtime.GC()
		if err := pprof.WriteHeapProfile(o.MemProfile); err != nil {
			return sum, fmt.Errorf("load: heap profile: %w", err)
		}
	}
	if serr := stop(); serr != nil {
		return sum, fmt.Errorf("load: %w", serr)
	}
	if runErr != nil {
		return sum, fmt.Errorf("load: gateway stopped: %w", runErr)
	}
	mem.stop()
	sum.memory(mem)
	if o.PeakMemProfile != nil {
		if mem.profileErr != nil {
			return sum, fmt.Errorf("load: peak heap profile: %w", mem.profileErr)
		}
		if _, err := o.PeakMemProfile.Write(mem.profile.Bytes()); err != nil {
			return sum, fmt.Errorf("load: peak heap profile: %w", err)
		}
	}
	if pubErr != nil {
		return sum, fmt.Errorf("load: %w", pubErr)
	}
	if drainErr != nil {
		return sum, fmt.Errorf("load: %w", drainErr)
	}
	return sum, nil
}

// drain waits until the gateway has handled n messages and published every
// record it committed.
func drain(ctx context.Context, g *gateway.Gateway, n uint64, runDone <-chan struct{}) error {
	limit := time.After(drainTimeout)
	for g.Handled() < n || g.Published() < g.Emitted() {
		select {
		case <-ctx.Done():
			return nil // interrupted: report what was done
		case <-runDone:
			return errors.New("gateway stopped while draining")
		case <-limit:
			return fmt.Errorf("gateway handled %d of %d messages and published %d of %d records within %s",
				g.Handled(), n, g.Published(), g.Emitted(), drainTimeout)
		case <-time.After(time.Millisecond):
		}
	}
	return nil
}

// stopTimeout bounds the wait for the gateway to stop once cancelled.
const stopTimeout = 30 * time.Second

// ErrGatewayStuck is returned when the gateway does not stop after the run
// cancels it: a deadlock, whose goroutine stacks the error carries.
var ErrGatewayStuck = errors.New("gateway stuck")

// waitStopped waits for done at most limit; after that it returns
// ErrGatewayStuck with the process's goroutines grouped by stack.
func waitStopped(done <-chan struct{}, limit time.Duration) error {
	select {
	case <-done:
		return nil
	case <-time.After(limit):
	}
	var stacks strings.Builder
	if err := pprof.Lookup("goroutine").WriteTo(&stacks, 1); err != nil {
		stacks.WriteString("(stacks unavailable: " + err.Error() + ")")
	}
	return fmt.Errorf("%w: did not stop within %s of being cancelled; its goroutines:\n%s", ErrGatewayStuck, limit, stacks.String())
}

// ErrNotLoopback is returned for a broker whose host is not a loopback
// address.
var ErrNotLoopback = errors.New("not a loopback address")
