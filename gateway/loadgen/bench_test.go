package loadgen

import (
	"context"
	"testing"
	"time"

	"etpulse/gateway/internal/testenv"
)

// BenchmarkGatewayThroughput runs the live path (publishers, broker, the
// gateway's MQTT intake, pipeline and state file) for b.N messages of 20
// stations, against the embedded broker and, when the test environment has
// one, mosquitto. msg/s is the figure to watch; ack-p99-ms is the latency
// from publication to the gateway's durable acknowledgement at full load
// (it grows with the window, Little's law); cpu-us/msg holds up better than
// msg/s on a shared machine. E.g.
//
//	go test ./gateway/loadgen -run '^$' -bench GatewayThroughput -benchtime 100000x
func BenchmarkGatewayThroughput(b *testing.B) {
	b.Run("embedded", func(b *testing.B) { benchmarkRun(b, "") })
	b.Run("mosquitto", func(b *testing.B) { benchmarkRun(b, testenv.MQTT(b)) })
}

func benchmarkRun(b *testing.B, broker string) {
	o := Options{BrokerURL: broker, Stations: DefaultStations, Messages: max(b.N, 100), Duration: MaxDuration, Every: time.Hour}
	b.ResetTimer()
	sum, err := Run(context.Background(), o)
	b.StopTimer()
	if err != nil {
		b.Fatal(err)
	}
	if err := sum.Check(); err != nil {
		b.Fatalf("inconsistent run: %v", err)
	}
	b.ReportMetric(sum.MsgPerSecond, "msg/s")
	b.ReportMetric(sum.AckP99Ms, "ack-p99-ms")
	b.ReportMetric(float64(sum.PeakHeapBytes)/(1<<20), "peak-heap-MiB")
	if sum.CPUPerMsgUs > 0 {
		b.ReportMetric(sum.CPUPerMsgUs, "cpu-us/msg") // whole process; mosquitto's own CPU is not in it
	}
	b.ReportMetric(0, "ns/op") // the run's set-up dominates small b.N; msg/s is the figure
}
