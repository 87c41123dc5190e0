package mqtt

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"github.com/eclipse/paho.mqtt.golang/packets"
	"github.com/prometheus/client_golang/prometheus"
)

// Options configure a Client.
type Options struct {
	URL      string // tcp://, ssl://, tls://, ws:// or wss://
	ClientID string // stable: the broker keeps the persistent session under it
	Username string
	Password string
	TLS      *tls.Config // nil: default TLS settings for TLS schemes

	// CleanSession false (the default) keeps a persistent session: the broker
	// stores subscriptions and queues QoS 1 messages while the client is
	// away, and redelivers unacknowledged ones after a reconnect.
	CleanSession bool
	// DiscardSession makes Dial drop the session the broker keeps under
	// ClientID before its first connection (one connect with a clean
	// session, then a disconnect), so messages queued for an earlier run
	// are not delivered; the session it then starts follows CleanSession.
	// For a gateway whose state file is new: the earlier run's queue holds
	// readings that state never saw.
	DiscardSession bool

	KeepAlive      time.Duration // default 30s
	ConnectTimeout time.Duration // one connection attempt; default 10s

	// MaxInflight bounds the received messages queued or being handled.
	// When the queue is full the client stops reading from the network until
	// a handler finishes. Default 256.
	MaxInflight int
	// Workers is the number of goroutines running handlers. Default 4.
	Workers int

	// Availability, when set, is a retained topic that tells automations
	// whether this client is alive: the broker publishes AvailabilityOffline
	// there when the connection dies without a DISCONNECT (the last will,
	// QoS 1, retained), the client publishes AvailabilityOnline (retained)
	// after every connect and AvailabilityOffline on Close.
	Availability string

	Logger     *slog.Logger          // nil: discard; the caller adds its own attributes (e.g. component)
	Registerer prometheus.Registerer // nil: metrics are not registered
	// OnConnectionChange, when set, is called with true on every (re)connect
	// and false on every connection loss. It must not block.
	OnConnectionChange func(up bool)
	// OnDialRetry, when set, is called by Dial after each failed first
	// connection attempt that will be retried, with the error and the wait
	// before the next attempt (e.g. for a readiness check that says what
	// it waits for). It must not block.
	OnDialRetry func(err error, retryIn time.Duration)
}

// The payloads of the availability topic (Options.Availability).
const (
	AvailabilityOnline  = "online"
	AvailabilityOffline = "offline"
)

// Defaults applied by Dial to unset Options.
const (
	DefaultKeepAlive      = 30 * time.Second
	DefaultConnectTimeout = 10 * time.Second
	DefaultMaxInflight    = 256
	DefaultWorkers        = 4
	// MaxRetryInterval is the longest wait between connection attempts.
	MaxRetryInterval = 30 * time.Second
)

// ErrClosed is returned by operations on a closed Client.
var ErrClosed = errors.New("mqtt client closed")

type subscription struct {
	filter string
	qos    byte
	handle func(Message)
}

type job struct {
	msg    Message
	handle func(Message)
}

// Client is an MQTT 3.1.1 client with a persistent session, automatic
// reconnect with resubscription, manual acknowledgements and a bounded
// handler queue.
//
// Back-pressure: paho's router goroutine only puts each message on a queue of
// MaxInflight entries that Workers goroutines drain. When the queue is full
// the router blocks, so paho stops reading from the connection; for QoS 1
// that is safe (the broker keeps the messages and its own in-flight window
// stops it sending). If a handler stays blocked for longer than the
// keep-alive, the connection drops and the broker redelivers the
// unacknowledged messages after the reconnect: nothing is dropped.
type Client struct {
	c    paho.Client
	opts Options
	log  *slog.Logger
	m    *metrics

	mu      sync.Mutex
	subs    map[string]subscription // by filter
	order   []string                // filters in subscription order
	routes  routes                  // filter index over order (route.go)
	pending []Message               // received before any matching Subscribe (persistent session start-up)

	queue     chan job
	done      chan struct{}
	closeOnce sync.Once
	workers   sync.WaitGroup
	inflight  atomic.Int64
	connects  atomic.Int64
}

var (
	_ Publisher  = (*Client)(nil)
	_ Subscriber = (*Client)(nil)
)

// Dial connects to the broker and returns once the first connection is up.
// A refused connection (bad credentials, rejected client id, not authorised)
// and a broker certificate that does not verify fail at once; network
// errors are retried with back-off until ctx ends.
// After the first connection the client reconnects by itself.
func Dial(ctx context.Context, o Options) (*Client, error) {
	if o.URL == "" {
		return nil, errors.New("mqtt dial: empty broker url")
	}
	if o.ClientID == "" {
		return nil, errors.New("mqtt dial: empty client id (a stable id is needed for the persistent session)")
	}
	if o.KeepAlive <= 0 {
		o.KeepAlive = DefaultKeepAlive
	}
	if o.ConnectTimeout <= 0 {
		o.ConnectTimeout = DefaultConnectTimeout
	}
	if o.MaxInflight <= 0 {
		o.MaxInflight = DefaultMaxInflight
	}
	if o.Workers <= 0 {
		o.Workers = DefaultWorkers
	}
	lg := o.Logger
	if lg == nil {
		lg = slog.New(slog.DiscardHandler)
	}
	m, err := newMetrics(o.Registerer)
	if err != nil {
		return nil, fmt.Errorf("mqtt dial: %w", err)
	}
	c := &Client{
		opts:  o,
		log:   lg.With("broker", redactURL(o.URL), "client_id", o.ClientID),
		m:     m,
		subs:  map[string]subscription{},
		queue: make(chan job, o.MaxInflight),
		done:  make(chan struct{}),
	}

	po := paho.NewClientOptions().
		AddBroker(o.URL).
		SetClientID(o.ClientID).
		SetUsername(o.Username).
		SetPassword(o.Password).
		SetCleanSession(o.CleanSession).
		SetKeepAlive(o.KeepAlive).
		SetPingTimeout(o.ConnectTimeout).
		SetConnectTimeout(o.ConnectTimeout).
		SetWriteTimeout(o.ConnectTimeout).
		SetAutoReconnect(true).
		SetMaxReconnectInterval(MaxRetryInterval).
		SetConnectRetry(false).
		SetResumeSubs(true).
		SetAutoAckDisabled(true).
		// The router goroutine only enqueues (see Client); ordered dispatch
		// makes a full queue stop the network reader instead of paho
		// starting one goroutine per message, which would be unbounded.
		SetOrderMatters(true).
		SetDefaultPublishHandler(c.dispatch).
		SetOnConnectHandler(c.onConnect).
		SetConnectionLostHandler(c.onConnectionLost).
		SetReconnectingHandler(func(paho.Client, *paho.ClientOptions) {
			c.log.Info("reconnecting")
		})
	if o.TLS != nil {
		po.SetTLSConfig(o.TLS)
	}
	if o.Availability != "" {
		po.SetWill(o.Availability, AvailabilityOffline, 1, true)
	}
	c.c = paho.NewClient(po)

	for i := 0; i < o.Workers; i++ {
		c.workers.Add(1)
		go c.work()
	}

	backoff := 500 * time.Millisecond
	discard := o.DiscardSession
	for {
		var err error
		if discard {
			if err = discardSession(ctx, *po); err == nil {
				discard = false
				c.log.Info("discarded the session the broker kept for this client id")
			}
		}
		if err == nil {
			err = c.connectOnce(ctx)
		}
		if err == nil {
			return c, nil
		}
		if refused(err) || ctx.Err() != nil {
			c.stopWorkers()
			return nil, fmt.Errorf("mqtt dial %s: %w", redactURL(o.URL), err)
		}
		if untrusted(err) {
			c.stopWorkers()
			return nil, fmt.Errorf("mqtt dial %s: certificate check failed (check tls.ca_file, tls.cert_file and key_file, and that the broker's certificate names this host): %w", redactURL(o.URL), err)
		}
		c.log.Warn("connect failed, retrying", "err", err, "retry_in", backoff)
		if f := o.OnDialRetry; f != nil {
			f(err, backoff)
		}
		select {
		case <-ctx.Done():
			c.stopWorkers()
			return nil, fmt.Errorf("mqtt dial %s: %w (last error: %v)", redactURL(o.URL), ctx.Err(), err)
		case <-time.After(backoff):
		}
		backoff = min(backoff*2, MaxRetryInterval)
	}
}

func (c *Client) connectOnce(ctx context.Context) error {
	tok := c.c.Connect()
	select {
	case <-tok.Done():
		return tok.Error()
	case <-ctx.Done():
		c.c.Disconnect(0)
		return ctx.Err()
	}
}

// discardSession connects once with a clean session and the options of
// po, without handlers or last will, and disconnects: the broker drops the
// session it kept under the client id, with its queued messages.
func discardSession(ctx context.Context, po paho.ClientOptions) error {
	po.SetCleanSession(true).SetAutoReconnect(false).SetConnectRetry(false).
		SetOnConnectHandler(nil).SetConnectionLostHandler(nil).SetReconnectingHandler(nil).
		SetDefaultPublishHandler(nil)
	po.WillEnabled = false
	pc := paho.NewClient(&po)
	tok := pc.Connect()
	select {
	case <-tok.Done():
	case <-ctx.Done():
		pc.Disconnect(0)
		return ctx.Err()
	}
	if err := tok.Error(); err != nil {
		return err
	}
	pc.Disconnect(250)
	return nil
}

// refused reports a CONNACK refusal that retrying cannot fix.
func refused(err error) bool {
	return errors.Is(err, packets.ErrorRefusedBadUsernameOrPassword) ||
		errors.Is(err, packets.ErrorRefusedNotAuthorised) ||
		errors.Is(err, packets.ErrorRefusedIDRejected) ||
		errors.Is(err, packets.ErrorRefusedBadProtocolVersion)
}

// untrusted reports a failed certificate check on either side: the broker's
// certificate does not verify (a wrong CA, a certificate for another host,
// an expired one), or the broker rejected ours or its absence (a TLS alert
// about the certificate). Retrying does not fix the configuration, so Dial
// fails at once, like a refusal.
func untrusted(err error) bool {
	var (
		verify   *tls.CertificateVerificationError
		unknown  x509.UnknownAuthorityError
		hostname x509.HostnameError
		invalid  x509.CertificateInvalidError
		remote   *net.OpError
	)
	// A TLS alert from the broker arrives as a "remote error" whose text names
	// it ("tls: certificate required", "tls: bad certificate", "tls: unknown
	// certificate authority", ...).
	if errors.As(err, &remote) && remote.Op == "remote error" && remote.Err != nil &&
		strings.Contains(remote.Err.Error(), "certificate") {
		return true
	}
	return errors.As(err, &verify) || errors.As(err, &unknown) || errors.As(err, &hostname) || errors.As(err, &invalid)
}

func (c *Client) onConnect(pc paho.Client) {
	n := c.connects.Add(1)
	c.m.connected.Set(1)
	if c.opts.Availability != "" {
		// The birth message; paho's connect handler must not wait on a token.
		tok := pc.Publish(c.opts.Availability, 1, true, AvailabilityOnline)
		go func() {
			if !tok.WaitTimeout(c.opts.ConnectTimeout) {
				c.log.Warn("availability: online not acknowledged in time", "topic", c.opts.Availability)
			} else if err := tok.Error(); err != nil {
				c.log.Warn("availability: online not published", "topic", c.opts.Availability, "err", err)
			}
		}()
	}
	if n > 1 {
		c.m.reconnects.Inc()
		c.log.Info("reconnected", "connects", n)
	} else {
		c.log.Info("connected")
	}
	// Subscribe again on every reconnect: a persistent session keeps the
	// subscriptions, but a broker that lost its state (restart without
	// persistence) does not. On the first connect Subscribe does it.
	if n == 1 {
		if f := c.opts.OnConnectionChange; f != nil {
			f(true)
		}
		return
	}
	c.mu.Lock()
	subs := make([]subscription, 0, len(c.order))
	for _, f := range c.order {
		subs = append(subs, c.subs[f])
	}
	c.mu.Unlock()
	for _, s := range subs {
		tok := pc.Subscribe(s.filter, s.qos, nil)
		go func() {
			if !tok.WaitTimeout(c.opts.ConnectTimeout) {
				c.log.Warn("resubscribe timed out", "filter", s.filter)
				return
			}
			if err := tok.Error(); err != nil {
				c.log.Error("resubscribe failed", "filter", s.filter, "err", err)
			}
		}()
	}
	if f := c.opts.OnConnectionChange; f != nil {
		f(true)
	}
}

func (c *Client) onConnectionLost(_ paho.Client, err error) {
	c.m.connected.Set(0)
	c.log.Warn("connection lost", "err", err)
	if f := c.opts.OnConnectionChange; f != nil {
		f(false)
	}
}

// dispatch runs on paho's router goroutine for every received message.
func (c *Client) dispatch(_ paho.Client, pm paho.Message) {
	c.m.received.Inc()
	var once sync.Once
	msg := Message{
		Topic:     pm.Topic(),
		Payload:   pm.Payload(),
		Duplicate: pm.Duplicate(),
		QoS:       pm.Qos(),
		Retained:  pm.Retained(),
		Ack:       func() { once.Do(pm.Ack) },
	}
	c.mu.Lock()
	handle := c.match(msg.Topic)
	if handle == nil {
		// With a persistent session the broker may deliver queued messages
		// before this process has called Subscribe. Hold them (unacknowledged)
		// for the Subscribe that will claim them. Dropping one would lose it
		// until the next reconnect; holding is bounded by the broker's own
		// window of unacknowledged QoS 1 messages, which stops it sending.
		c.pending = append(c.pending, msg)
		if len(c.pending) == c.opts.MaxInflight {
			c.log.Warn("many messages held for a subscription not made yet", "held", len(c.pending))
		}
		c.mu.Unlock()
		return
	}
	c.mu.Unlock()
	c.enqueue(job{msg: msg, handle: handle})
}

// enqueue blocks while the queue is full (back-pressure) or until Close.
func (c *Client) enqueue(j job) {
	c.inflight.Add(1)
	c.m.inflight.Inc()
	select {
	case c.queue <- j:
	case <-c.done:
		c.inflight.Add(-1)
		c.m.inflight.Dec()
	}
}

func (c *Client) work() {
	defer c.workers.Done()
	for {
		select {
		case <-c.done:
			return
		case j := <-c.queue:
			c.run(j)
		}
	}
}

func (c *Client) run(j job) {
	defer func() {
		c.inflight.Add(-1)
		c.m.inflight.Dec()
		if r := recover(); r != nil {
			c.log.Error("message handler panicked; message left unacknowledged", "topic", j.msg.Topic, "panic", fmt.Sprint(r))
		}
	}()
	j.handle(j.msg)
}

// match returns the handler of the first subscription (in subscription
// order) whose filter matches topic, or nil; its cost does not grow with the
// number of subscriptions (see routes). c.mu must be held.
func (c *Client) match(topic string) func(Message) {
	if pos := c.routes.lookup(topic); pos >= 0 {
		return c.subs[c.order[pos]].handle
	}
	return nil
}

// register records the subscription for routing and returns the held
// messages it claims (see Client.pending).
func (c *Client) register(filter string, qos byte, handle func(Message)) []Message {
	c.mu.Lock()
	defer c.mu.Unlock()
	if _, ok := c.subs[filter]; !ok {
		c.routes.add(filter, len(c.order))
		c.order = append(c.order, filter)
	}
	c.subs[filter] = subscription{filter: filter, qos: qos, handle: handle}
	var claimed []Message
	kept := c.pending[:0]
	for _, m := range c.pending {
		if MatchTopic(filter, m.Topic) {
			claimed = append(claimed, m)
		} else {
			kept = append(kept, m)
		}
	}
	c.pending = kept
	return claimed
}

// Subscribe subscribes to filter and routes its messages to handle, on one of
// the client's worker goroutines. Handlers must call Message.Ack once the
// message's effect is durable. The subscription is renewed on every
// reconnect. Subscribing to a filter again replaces its handler.
func (c *Client) Subscribe(filter string, qos byte, handle func(Message)) error {
	if handle == nil {
		return fmt.Errorf("mqtt subscribe %q: nil handler", filter)
	}
	if qos > 1 {
		return fmt.Errorf("mqtt subscribe %q: qos must be 0 or 1, got %d", filter, qos)
	}
	if err := ValidFilter(filter); err != nil {
		return fmt.Errorf("mqtt subscribe: %w", err)
	}
	select {
	case <-c.done:
		return fmt.Errorf("mqtt subscribe %q: %w", filter, ErrClosed)
	default:
	}
	claimed := c.register(filter, qos, handle)
	for _, m := range claimed {
		c.enqueue(job{msg: m, handle: handle})
	}

	tok := c.c.Subscribe(filter, qos, nil)
	if !tok.WaitTimeout(c.opts.ConnectTimeout) {
		// Not connected right now: onConnect subscribes when the link is back.
		c.log.Warn("subscribe not confirmed yet; will subscribe on reconnect", "filter", filter)
		return nil
	}
	if err := tok.Error(); err != nil {
		return fmt.Errorf("mqtt subscribe %q: %w", filter, err)
	}
	if st, ok := tok.(*paho.SubscribeToken); ok {
		for _, code := range st.Result() {
			if code == 0x80 {
				return fmt.Errorf("mqtt subscribe %q: refused by the broker", filter)
			}
		}
	}
	return nil
}

// Publish sends one message and waits until the broker acknowledges it (QoS
// 1) or it is written (QoS 0), or ctx ends. While the connection is down a
// QoS 1 message waits in paho's store and goes out after the reconnect; if
// ctx ends first Publish returns ctx's error but the message may still be
// sent later.
func (c *Client) Publish(ctx context.Context, topic string, qos byte, retained bool, payload []byte) error {
	if qos > 1 {
		return fmt.Errorf("mqtt publish %q: qos must be 0 or 1, got %d", topic, qos)
	}
	if topic == "" || strings.ContainsAny(topic, "+#") {
		return fmt.Errorf("mqtt publish: invalid topic %q", topic)
	}
	select {
	case <-c.done:
		return fmt.Errorf("mqtt publish %q: %w", topic, ErrClosed)
	default:
	}
	tok := c.c.Publish(topic, qos, retained, payload)
	select {
	case <-tok.Done():
		if err := tok.Error(); err != nil {
			return fmt.Errorf("mqtt publish %q: %w", topic, err)
		}
		return nil
	case <-ctx.Done():
		return fmt.Errorf("mqtt publish %q: %w", topic, ctx.Err())
	case <-c.done:
		return fmt.Errorf("mqtt publish %q: %w", topic, ErrClosed)
	}
}

// Connected reports whether the connection to the broker is up now.
func (c *Client) Connected() bool { return c.c.IsConnectionOpen() }

// Connects returns how many times the client has connected (1 after Dial,
// one more per reconnect).
func (c *Client) Connects() uint64 { return uint64(c.connects.Load()) }

// Inflight returns the number of received messages queued or being handled.
func (c *Client) Inflight() int { return int(c.inflight.Load()) }

// Close disconnects, giving in-progress work up to quiesce to complete
// (with Options.Availability set, it first publishes AvailabilityOffline,
// waiting up to quiesce for the broker's acknowledgement), stops the workers (messages still queued are left unacknowledged, so the
// broker redelivers them to the next session) and waits for running
// handlers to return. Close is idempotent.
func (c *Client) Close(quiesce time.Duration) {
	c.closeOnce.Do(func() {
		ms := quiesce.Milliseconds()
		if ms < 0 {
			ms = 0
		}
		if c.opts.Availability != "" && c.c.IsConnectionOpen() {
			tok := c.c.Publish(c.opts.Availability, 1, true, AvailabilityOffline)
			if !tok.WaitTimeout(quiesce) || tok.Error() != nil {
				c.log.Warn("availability: offline not acknowledged; the broker's last will says it", "topic", c.opts.Availability)
			}
		}
		c.c.Disconnect(uint(ms))
		c.stopWorkers()
		c.m.connected.Set(0)
		c.log.Info("closed")
	})
}

func (c *Client) stopWorkers() {
	select {
	case <-c.done:
	default:
		close(c.done)
	}
	c.workers.Wait()
}

// RedactURL returns the broker URL u with any user information replaced
// by REDACTED, for logs and status texts.
func RedactURL(u string) string { return redactURL(u) }

func redactURL(u string) string {
	if i := strings.Index(u, "@"); i >= 0 {
		if j := strings.Index(u, "://"); j >= 0 && j < i {
			return u[:j+3] + "REDACTED" + u[i:]
		}
	}
	return u
}
