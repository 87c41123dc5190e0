package mqtt

import (
	"context"
	"fmt"
	"math/rand/v2"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"etpulse/gateway/internal/testenv"
)

// BenchmarkQoS1RoundTrip measures QoS 1 messages per second through the
// broker: 16 publishing goroutines, one subscriber with manual acks and the
// default queue and workers.
func BenchmarkQoS1RoundTrip(b *testing.B) {
	url := testenv.MQTT(b)
	id := fmt.Sprintf("%08x", rand.Uint32())
	topic := "etpulse-bench/" + id
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	sub, err := Dial(ctx, Options{URL: url, ClientID: "bs-" + id, CleanSession: true})
	if err != nil {
		b.Fatal(err)
	}
	defer sub.Close(0)
	pub, err := Dial(ctx, Options{URL: url, ClientID: "bp-" + id, CleanSession: true})
	if err != nil {
		b.Fatal(err)
	}
	defer pub.Close(0)
	var got atomic.Int64
	done := make(chan struct{})
	target := int64(b.N)
	if err := sub.Subscribe(topic, 1, func(m Message) {
		m.Ack()
		if got.Add(1) == target {
			close(done)
		}
	}); err != nil {
		b.Fatal(err)
	}
	payload := []byte(`{"value": 21.5, "time": "2026-06-01T10:00:00Z"}`)
	b.ResetTimer()
	start := time.Now()
	var wg sync.WaitGroup
	const publishers = 16
	for p := 0; p < publishers; p++ {
		wg.Add(1)
		go func(p int) {
			defer wg.Done()
			for i := p; i < b.N; i += publishers {
				if err := pub.Publish(context.Background(), topic, 1, false, payload); err != nil {
					b.Error(err)
					return
				}
			}
		}(p)
	}
	wg.Wait()
	select {
	case <-done:
	case <-time.After(60 * time.Second):
		b.Fatalf("received %d of %d", got.Load(), b.N)
	}
	b.ReportMetric(float64(b.N)/time.Since(start).Seconds(), "msg/s")
}
