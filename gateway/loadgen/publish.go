package loadgen

import (
	"context"
	"fmt"
	"net"
	"net/url"
	"strings"
	"sync/atomic"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"

	"etpulse/gateway/demo"
)

// CheckLoopback returns an error unless rawURL is a tcp:// (or mqtt://)
// broker address whose host is a loopback IP address or "localhost": load is
// sent only to this machine.
func CheckLoopback(rawURL string) error {
	u, err := url.Parse(rawURL)
	if err != nil {
		return fmt.Errorf("broker %q: %w", rawURL, err)
	}
	if u.Scheme != "tcp" && u.Scheme != "mqtt" {
		return fmt.Errorf("broker %q: scheme must be tcp:// (a plain connection on this machine), got %q", rawURL, u.Scheme)
	}
	host := u.Hostname()
	if host == "" || u.Port() == "" {
		return fmt.Errorf("broker %q: want tcp://127.0.0.1:PORT", rawURL)
	}
	if strings.EqualFold(host, "localhost") {
		return nil
	}
	if ip := net.ParseIP(host); ip != nil && ip.IsLoopback() {
		return nil
	}
	return fmt.Errorf("broker host %q is %w: load is sent only to this machine (use 127.0.0.1 or ::1)", host, ErrNotLoopback)
}

// plan is what every publisher publishes: whole ticks of its stations, with
// the malformed messages after the ticks listed in bad.
type plan struct {
	farm  *farm
	ticks int
	bad   map[int]int // tick -> malformed messages after it (publisher 0)
	rate  float64     // msg/s over all publishers; 0 unpaced
}

func newPlan(f *farm, o Options) (*plan, error) {
	p := &plan{farm: f, ticks: (o.Messages - o.Bad) / f.perTick, bad: map[int]int{}, rate: o.Rate}
	if p.ticks < 1 {
		return nil, fmt.Errorf("messages must be at least %d for one reading of every sensor of %d stations (plus %d malformed), got %d",
			f.perTick+o.Bad, len(f.stations), o.Bad, o.Messages)
	}
	for i := 0; i < o.Bad; i++ {
		p.bad[(i+1)*p.ticks/(o.Bad+1)]++
	}
	return p, nil
}

// pubWindow bounds one connection's publications awaiting the broker's
// PUBACK (the embedded broker disconnects a client above 1024).
const pubWindow = 256

// publisher is one publishing connection and the stations it publishes.
type publisher struct {
	idx      int
	c        paho.Client
	stations []*station
	sent     atomic.Int64 // acknowledged by the broker
	bad      atomic.Int64 // of which malformed
}

func dialPublishers(ctx context.Context, brokerURL, runID string, n int, f *farm) ([]*publisher, error) {
	pubs := make([]*publisher, n)
	for i := range pubs {
		pubs[i] = &publisher{idx: i}
	}
	for _, st := range f.stations {
		p := pubs[st.idx%n]
		p.stations = append(p.stations, st)
	}
	for _, p := range pubs {
		o := paho.NewClientOptions().AddBroker(brokerURL).
			SetClientID(fmt.Sprintf("etpulse-load-%s-pub%d", runID, p.idx)).
			SetCleanSession(true).SetAutoReconnect(false).SetConnectRetry(false).
			SetConnectTimeout(10 * time.Second).SetKeepAlive(30 * time.Second).SetWriteTimeout(10 * time.Second)
		p.c = paho.NewClient(o)
		tok := p.c.Connect()
		select {
		case <-tok.Done():
		case <-ctx.Done():
			closeAll(pubs)
			return nil, ctx.Err()
		}
		if err := tok.Error(); err != nil {
			closeAll(pubs)
			return nil, fmt.Errorf("publisher %d: connect: %w", p.idx, err)
		}
	}
	return pubs, nil
}

func closeAll(pubs []*publisher) {
	for _, p := range pubs {
		p.close()
	}
}

func (p *publisher) close() {
	if p.c != nil && p.c.IsConnected() {
		p.c.Disconnect(250)
	}
}

// run publishes the plan's ticks for the publisher's stations until done or
// ctx ends (a tick already started is finished). At each tick it waits for
// its turn (tracker.waitTurn) and moves the gateway clock to the tick; each
// message is recorded with the tracker just before it goes to the connection.
func (p *publisher) run(ctx context.Context, pl *plan, tr *tracker, clock *demo.Clock) error {
	f := pl.farm
	var window []paho.Token
	wait := func(tok paho.Token) error {
		if !tok.WaitTimeout(30 * time.Second) {
			return fmt.Errorf("publisher %d: broker did not acknowledge a publication within 30s", p.idx)
		}
		if err := tok.Error(); err != nil {
			return fmt.Errorf("publisher %d: publish: %w", p.idx, err)
		}
		p.sent.Add(1)
		return nil
	}
	flush := func() error {
		for _, tok := range window {
			if err := wait(tok); err != nil {
				return err
			}
		}
		window = window[:0]
		return nil
	}
	var perSec float64 // this connection's share of the rate
	if pl.rate > 0 {
		mine := 0
		for _, st := range p.stations {
			mine += len(st.topics)
		}
		perSec = pl.rate * float64(mine) / float64(f.perTick)
	}
	start, n := time.Now(), 0
	var badTopic string
	if len(p.stations) > 0 {
		badTopic = p.stations[0].topics[0]
	}
	buf := make([]outMsg, 0, 64)
	for k := 0; k < pl.ticks; k++ {
		buf = buf[:0]
		for _, st := range p.stations {
			from := len(buf)
			buf = f.messages(st, k, buf)
			if end, ok := f.closingHour(st, k); ok {
				for i := from; i < len(buf); i++ {
					buf[i].station, buf[i].closes = st.idx, end.Unix()
				}
			}
		}
		if p.idx == 0 {
			for i := 0; i < pl.bad[k]; i++ {
				buf = append(buf, outMsg{topic: badTopic, payload: badPayload, bad: true})
			}
		}
		if !tr.waitTurn(ctx, p.idx, k, len(buf)) {
			break
		}
		clock.Set(f.tickTime(k))
		for _, m := range buf {
			if perSec > 0 {
				due := start.Add(time.Duration(float64(n) / perSec * float64(time.Second)))
				if d := time.Until(due); d > time.Millisecond {
					time.Sleep(d) // bounded by the rate; the tick is finished even after ctx ends
				}
			}
			n++
			tr.publishing(p.idx, k, m)
			window = append(window, p.c.Publish(m.topic, 1, false, m.payload))
			if m.bad {
				p.bad.Add(1)
			}
			if len(window) >= pubWindow {
				if err := wait(window[0]); err != nil {
					return err
				}
				window = window[1:]
			}
		}
		tr.tickDone(p.idx, k)
	}
	return flush()
}

// runPublishers runs every publisher until done and returns the first
// error; on an error it calls stop so the others end too.
func runPublishers(ctx context.Context, stop func(), pubs []*publisher, pl *plan, tr *tracker, clock *demo.Clock) error {
	errs := make(chan error, len(pubs))
	for _, p := range pubs {
		go func() { errs <- p.run(ctx, pl, tr, clock) }()
	}
	var first error
	for range pubs {
		if err := <-errs; err != nil && first == nil {
			first = err
			stop()
		}
	}
	return first
}
