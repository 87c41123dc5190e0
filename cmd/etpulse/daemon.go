package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"os"
	"strings"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"etpulse/gateway"
	"etpulse/gateway/buildinfo"
	"etpulse/gateway/config"
	"etpulse/gateway/logfmt"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/sdnotify"
	"etpulse/gateway/state"
)

var runHelp = helpText{
	name:  "run",
	usage: "etpulse run [--config] FILE [--log-format text|json] [--log-level LEVEL]",
	intro: `Runs the gateway: subscribes to the configured sensor topics, closes
clock hours and publishes each hourly record on
<topic_prefix>/<site>/<station>/hour, keeps the zone balances and sends
valve commands, raises alerts, writes the store, and serves /metrics,
/healthz and /readyz on http.listen (default 127.0.0.1:9470). Logs go to
stderr.

The first SIGINT or SIGTERM stops taking messages, finishes the batch in
hand, publishes the hours it closed, flushes the store and exits 0; a second
one forces exit. A state file whose disk is full (or fails writes) pauses
intake instead: messages stay unacknowledged, a critical alert is raised,
/readyz answers 503, and intake resumes by itself once a write succeeds.
Under systemd (Type=notify) it reports ready, pings the watchdog while its
intake loop goes round, and reports stopping. Start from
deploy/etpulse.example.yaml.`,
	outro: `Exit status: 0 stopped by a signal, 1 failure at run time (e.g. the state
file is locked by another gateway), 2 bad command line or configuration.`,
}

// runDaemon is `etpulse run --config FILE`: the live gateway until the first
// SIGINT/SIGTERM, then an ordered shutdown and exit 0.
func runDaemon(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("run", flag.ContinueOnError)
	cfgPath := fs.String("config", "", "configuration `file` (YAML); check it first with 'etpulse check'")
	logFormat := fs.String("log-format", "text", "log `format` on stderr: text or json")
	logLevel := fs.String("log-level", "info", "log `level`: debug, info, warn or error")
	if code, done := parseConfigFlags(fs, args, runHelp, cfgPath, stdout, stderr); done {
		return code
	}
	if fs.NArg() > 0 {
		return usageError(stderr, runHelp, "unexpected argument %q", fs.Arg(0))
	}
	if *cfgPath == "" {
		return usageError(stderr, runHelp, configForms)
	}
	log, err := newLogger(stderr, *logFormat, *logLevel)
	if err != nil {
		return usageError(stderr, runHelp, "%v", err)
	}
	// Everything the process prints from here on goes through log: the
	// signal notices, the standard log package, paho's and http.Server's
	// loggers; with --log-format json every line is JSON.
	logSignalNotices(ctx, log)
	defer routeLibraryLogs(log)()
	cfg, err := config.Load(*cfgPath)
	if err != nil {
		if strings.EqualFold(*logFormat, "json") {
			log.Error("configuration refused", "err", err.Error()+configOrigin(*cfgPath))
		} else {
			fmt.Fprintf(stderr, "etpulse run: %v%s\n", err, configOrigin(*cfgPath))
		}
		return exitUsage
	}
	for _, w := range cfg.Warnings() {
		log.Warn("implausible configuration", "problem", w)
	}
	if err := daemon(ctx, cfg, log); err != nil {
		log.Error("gateway failed", "err", err)
		if errors.Is(err, state.ErrNewerVersion) || errors.Is(err, state.ErrNotStateFile) {
			return exitUsage // the configuration points at the wrong file for this binary
		}
		return exitError
	}
	return exitOK
}

// daemon opens the state file, connects to the broker, runs the gateway
// until ctx ends, and closes what it opened in reverse order.
func daemon(ctx context.Context, cfg *config.Config, log *slog.Logger) (err error) {
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	if err := buildinfo.Register(reg, buildinfo.Read(version, revision)); err != nil {
		return err
	}

	fresh := freshStateFile(cfg.State.Path)
	db, err := state.OpenLogged(cfg.State.Path, log.With("component", "state"))
	if err != nil {
		return err
	}
	defer func() {
		if cerr := db.Close(); cerr != nil && err == nil {
			err = fmt.Errorf("close state: %w", cerr)
		}
	}()

	mo, err := mqtt.OptionsFromConfig(cfg.Broker)
	if err != nil {
		return err
	}
	mo.Logger = log.With("component", "mqtt")
	mo.Registerer = reg
	// The gateway's handler only queues the message; one worker keeps the
	// broker's order, which decides what counts as a late reading.
	mo.Workers = 1
	mo.Availability = config.AvailabilityTopic(cfg.Prefix(), cfg.Broker.ClientID)
	if fresh {
		// The broker may keep a session under this client id from an earlier
		// state file; its queued readings would arrive first and move the
		// stations' clocks past the real backlog. Clean once, then persistent.
		mo.DiscardSession = true
		log.Info("fresh state file: starting a clean MQTT session, the broker's queued messages for client id "+cfg.Broker.ClientID+" are discarded",
			"state", cfg.State.Path, "client_id", cfg.Broker.ClientID)
	}
	// The gateway is composed before the connection exists, so that Run
	// subscribes right after the session resumes, and its HTTP endpoints
	// start before the dial: /healthz answers and /readyz says what the
	// gateway waits for while the broker is unreachable.
	broker := &lateBroker{url: mqtt.RedactURL(cfg.Broker.URL)}
	mo.OnDialRetry = broker.dialFailed
	g, err := gateway.New(cfg, gateway.Deps{
		Logger: log, Registerer: reg, Gatherer: reg, DB: db, MQTT: broker,
	})
	if err != nil {
		return err
	}
	stopHTTP := g.StartHTTP(ctx)
	defer stopHTTP()
	log.Info("connecting to broker", "url", broker.url, "client_id", cfg.Broker.ClientID, "topic_prefix", cfg.Prefix())
	client, err := mqtt.Dial(ctx, mo)
	if err != nil {
		if ctx.Err() != nil {
			log.Info("stopped before the broker connection was up")
			return nil
		}
		return err
	}
	defer client.Close(2 * time.Second)
	broker.set(client)
	stopNotify := notifySystemd(ctx, g, log)
	defer stopNotify()
	return g.Run(ctx)
}

// freshStateFile reports whether the state file at path is about to be
// created (absent or empty).
func freshStateFile(path string) bool {
	fi, err := os.Stat(path)
	return errors.Is(err, fs.ErrNotExist) || (err == nil && fi.Size() == 0)
}

// notifySystemd tells systemd (a unit of Type=notify, $NOTIFY_SOCKET) that
// the gateway is ready once it has subscribed, pings the watchdog
// (WatchdogSec=) while the intake loop is alive, and says it is stopping
// when ctx ends. The returned func stops it and waits for it.
func notifySystemd(ctx context.Context, g *gateway.Gateway, log *slog.Logger) (stop func()) {
	sd := sdnotify.FromEnv()
	if !sd.Enabled() {
		return func() {}
	}
	log = log.With("component", "systemd")
	nctx, cancel := context.WithCancel(ctx)
	var wg sync.WaitGroup
	wg.Go(func() {
		select {
		case <-g.Ready():
		case <-nctx.Done():
			return
		}
		if err := sd.Notify(sdnotify.Ready); err != nil {
			log.Warn("telling systemd the gateway is ready", "err", err)
		}
		var dog sync.WaitGroup
		dog.Go(func() { sd.RunWatchdog(nctx, sdnotify.WatchdogInterval(), g.Alive, time.Now, log) })
		<-nctx.Done()
		dog.Wait()
		if ctx.Err() != nil { // a signal: the ordered shutdown starts
			if err := sd.Notify(sdnotify.Stopping); err != nil {
				log.Warn("telling systemd the gateway is stopping", "err", err)
			}
		}
	})
	return func() { cancel(); wg.Wait() }
}

// lateBroker forwards to the MQTT client once it is connected, and until
// then says what the first connection waits for.
type lateBroker struct {
	url string // redacted

	mu      sync.Mutex
	c       *mqtt.Client
	lastErr error         // the last failed first attempt
	retryIn time.Duration // the wait after it
	retryAt time.Time
}

var _ gateway.Broker = (*lateBroker)(nil)

func (b *lateBroker) set(c *mqtt.Client) {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.c = c
}

func (b *lateBroker) client() (*mqtt.Client, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.c == nil {
		return nil, errors.New("broker not connected yet")
	}
	return b.c, nil
}

// Publish forwards to the client.
func (b *lateBroker) Publish(ctx context.Context, topic string, qos byte, retained bool, payload []byte) error {
	c, err := b.client()
	if err != nil {
		return fmt.Errorf("publish %s: %w", topic, err)
	}
	return c.Publish(ctx, topic, qos, retained, payload)
}

// Subscribe forwards to the client.
func (b *lateBroker) Subscribe(filter string, qos byte, handle func(mqtt.Message)) error {
	c, err := b.client()
	if err != nil {
		return fmt.Errorf("subscribe %s: %w", filter, err)
	}
	return c.Subscribe(filter, qos, handle)
}

// Connected reports whether the client is connected (health checks).
func (b *lateBroker) Connected() bool {
	c, err := b.client()
	return err == nil && c.Connected()
}

// dialFailed records a failed first connection attempt (mqtt.Options.OnDialRetry).
func (b *lateBroker) dialFailed(err error, retryIn time.Duration) {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.lastErr, b.retryIn, b.retryAt = err, retryIn, time.Now().Add(retryIn)
}

// ConnectionState returns nil while connected, else what the connection
// waits for: the readiness check of /readyz.
func (b *lateBroker) ConnectionState() error {
	b.mu.Lock()
	defer b.mu.Unlock()
	switch {
	case b.c != nil && b.c.Connected():
		return nil
	case b.c != nil:
		return fmt.Errorf("connection to %s lost; reconnecting by itself (back-off up to %s)", b.url, mqtt.MaxRetryInterval)
	case b.lastErr == nil:
		return fmt.Errorf("connecting to %s: first attempt under way", b.url)
	}
	next := max(time.Until(b.retryAt), 0).Round(100 * time.Millisecond)
	return fmt.Errorf("connecting to %s: %v; retrying with back-off (now every %s, at most every %s), next attempt in %s",
		b.url, b.lastErr, b.retryIn, mqtt.MaxRetryInterval, next)
}

// routeLibraryLogs sends the standard log package's output and paho's
// error, warning and critical loggers through log until the returned
// function restores them.
func routeLibraryLogs(log *slog.Logger) (restore func()) {
	prev := slog.Default()
	slog.SetDefault(log) // also redirects the standard log package
	undoMQTT := mqtt.RouteLibraryLogs(log.With("component", "mqtt"))
	return func() {
		undoMQTT()
		slog.SetDefault(prev)
	}
}

func newLogger(w io.Writer, format, level string) (*slog.Logger, error) {
	var lv slog.Level
	if err := lv.UnmarshalText([]byte(level)); err != nil {
		return nil, fmt.Errorf("--log-level: %q is not debug, info, warn or error", level)
	}
	opts := logfmt.Options(lv)
	switch strings.ToLower(format) {
	case "text":
		return slog.New(slog.NewTextHandler(w, opts)), nil
	case "json":
		return slog.New(slog.NewJSONHandler(w, opts)), nil
	}
	return nil, fmt.Errorf("--log-format: %q is not text or json", format)
}
