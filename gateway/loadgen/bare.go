package loadgen

import (
	"context"
	"fmt"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"

	"etpulse/gateway/demo"
)

// BareSummary is the floor the gateway is compared with: a bare paho
// subscriber on the same broker, in the same run, fed by the same publishers
// with the same stations, payloads and window. It subscribes at QoS 1 to the
// same exact topics as the gateway, acknowledges each message as soon as it
// arrives and only counts it: no decoding, no state file.
type BareSummary struct {
	Published    int64   `json:"messages_published"` // acknowledged by the broker
	Received     int64   `json:"messages_received"`  // by the bare subscriber
	Seconds      float64 `json:"seconds"`            // first publication to last message received
	MsgPerSecond float64 `json:"msg_per_s"`
	AckP99Ms     float64 `json:"latency_p99_ms"` // publication to arrival at the subscriber
	// CPUPerMsgUs is the process's CPU per message during the bare phase:
	// the publishers and the bare subscriber, as the gateway phase's figure
	// is the publishers and the gateway.
	CPUPerMsgUs float64 `json:"cpu_us_per_msg"`
	// PeakHeapBytes is the live heap during the bare phase: the load
	// tool's own share (publishers, tracker, bare subscriber) of the
	// gateway phase's peak heap.
	PeakHeapBytes uint64 `json:"peak_heap_bytes"`
}

// subscribeChunk is the number of topic filters in one SUBSCRIBE packet.
const subscribeChunk = 500

// runBare runs the bare phase: a subscriber on the farm's topics, the
// publishers as fast as it takes them for at most o.BareDuration (and
// o.Messages), then waits until
// the subscriber has every message the broker acknowledged.
func runBare(ctx context.Context, o Options, f *farm, pl *plan, url, runID string) (*BareSummary, error) {
	lag := max(1, int(lagSim/o.Interval))
	tr := newTracker(f, o.Publishers, lag, o.Window)
	opts := paho.NewClientOptions().AddBroker(url).SetClientID("etpulse-load-" + runID + "-bare").
		SetCleanSession(true).SetAutoReconnect(false).SetConnectRetry(false).
		SetConnectTimeout(10 * time.Second).SetKeepAlive(30 * time.Second).
		// Without a route per subscription every message goes here: no
		// matching of topics in the client, the floor of what a subscriber does.
		SetDefaultPublishHandler(func(_ paho.Client, m paho.Message) { tr.ack(m.Topic()) })
	c := paho.NewClient(opts)
	if err := wait(ctx, c.Connect()); err != nil {
		return nil, fmt.Errorf("bare subscriber: connect: %w", err)
	}
	defer c.Disconnect(250)
	var filters map[string]byte
	for _, st := range f.stations {
		for _, topic := range st.topics {
			if filters == nil {
				filters = map[string]byte{}
			}
			filters[topic] = 1
			if len(filters) == subscribeChunk {
				if err := wait(ctx, c.SubscribeMultiple(filters, nil)); err != nil {
					return nil, fmt.Errorf("bare subscriber: subscribe: %w", err)
				}
				filters = nil
			}
		}
	}
	if filters != nil {
		if err := wait(ctx, c.SubscribeMultiple(filters, nil)); err != nil {
			return nil, fmt.Errorf("bare subscriber: subscribe: %w", err)
		}
	}

	pl = floorPlan(pl)
	pubs, err := dialPublishers(ctx, url, runID+"-bare", o.Publishers, f)
	if err != nil {
		return nil, fmt.Errorf("bare phase: %w", err)
	}
	defer closeAll(pubs)
	pubCtx, stop := context.WithTimeout(ctx, o.BareDuration)
	defer stop()
	go func() { <-pubCtx.Done(); tr.stop() }()
	mem := startMemory(false)
	defer mem.stop()
	cpu0 := ProcessCPU()
	began := tr.since()
	clock := demo.NewClock(SimStart) // nobody reads it in this phase
	if pubErr := runPublishers(pubCtx, stop, pubs, pl, tr, clock); pubErr != nil {
		return nil, fmt.Errorf("bare phase: %w", pubErr)
	}
	b := &BareSummary{}
	for _, p := range pubs {
		b.Published += p.sent.Load()
	}
	limit := time.Now().Add(drainTimeout)
	for {
		tr.mu.Lock()
		got := tr.acked
		tr.mu.Unlock()
		if got >= b.Published || time.Now().After(limit) || ctx.Err() != nil {
			break
		}
		time.Sleep(time.Millisecond)
	}
	cpu := ProcessCPU() - cpu0
	mem.stop()
	b.PeakHeapBytes = mem.peak.Load()
	tr.mu.Lock()
	defer tr.mu.Unlock()
	b.Received = tr.acked
	b.AckP99Ms = ms(tr.ackLat.quantile(0.99))
	if tr.acked > 0 {
		b.Seconds = (tr.lastAck - began).Seconds()
		if cpu0 > 0 {
			b.CPUPerMsgUs = float64(cpu.Microseconds()) / float64(tr.acked)
		}
	}
	if b.Seconds > 0 {
		b.MsgPerSecond = float64(b.Received) / b.Seconds
	}
	return b, nil
}

// floorPlan is pl unpaced: the floor is the bare subscriber's top rate,
// whatever the gateway phase's --rate.
func floorPlan(pl *plan) *plan {
	unpaced := *pl
	unpaced.rate = 0
	return &unpaced
}

// wait waits for an MQTT token or the end of ctx.
func wait(ctx context.Context, tok paho.Token) error {
	select {
	case <-tok.Done():
		return tok.Error()
	case <-ctx.Done():
		return ctx.Err()
	}
}
