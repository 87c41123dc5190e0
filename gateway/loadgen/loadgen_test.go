package loadgen

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/internal/testenv"
)

// smallRun is three stations (one of each payload format) with a reading a
// simulated minute: 5000 messages cover about 13 simulated hours.
func smallRun(broker string) Options {
	return Options{BrokerURL: broker, Stations: 3, Messages: 5000, Interval: time.Minute, Publishers: 2, Bad: 7,
		Duration: 5 * time.Minute}
}

// checkSmall checks the summary of smallRun: no timing, only that every
// message and hour is accounted for.
func checkSmall(t *testing.T, sum Summary) {
	t.Helper()
	// 3 stations publish 4 + 1 + 1 messages a tick: (5000 - 7) / 6 = 832
	// ticks, the last at 831 simulated minutes; the third station reads 14 s
	// into each minute. An hour closes once a reading is 2 min past its
	// end: (831 min + offset - 2 min) / 60 min = 13 hours each.
	assert.Equal(t, int64(832*6+7), sum.Published)
	assert.Equal(t, sum.Published, sum.Acked, "every published message acknowledged")
	assert.Equal(t, sum.Published, sum.Handled)
	assert.Equal(t, int64(7), sum.InjectedBad)
	assert.Equal(t, map[string]float64{"unparseable": 7}, sum.Rejected, "only the injected messages rejected")
	assert.Equal(t, 39, sum.HoursExpected)
	assert.Equal(t, 39, sum.HoursClosed, "records == hours x stations")
	assert.Equal(t, map[string]int{"block-01": 13, "block-02": 13, "block-03": 13}, sum.HoursPerStation)
	assert.Equal(t, uint64(39), sum.Records)
	assert.Zero(t, sum.Revisions)
	assert.Zero(t, sum.Incomplete)
	assert.Zero(t, sum.SilenceClosed)
	assert.Zero(t, sum.AlertsRaised, "the invented weather trips no drift check")
	assert.Zero(t, sum.OutboxDepth, "no store configured: nothing waits")
	assert.Equal(t, "messages", sum.StoppedBy)
	assert.Positive(t, sum.MsgPerSecond)
	assert.Positive(t, sum.AckP99Ms)
	assert.GreaterOrEqual(t, sum.AckP99Ms, sum.AckP50Ms)
	assert.Positive(t, sum.RecordP50Ms)
	assert.Positive(t, sum.PeakHeapBytes)
	// Hour close, all stations: 13 hour ends, each closed at all 3 stations.
	assert.Equal(t, 13, sum.HoursAllStations)
	assert.Positive(t, sum.HourCloseMaxMs)
	assert.GreaterOrEqual(t, sum.HourCloseMaxMs, sum.HourCloseP50Ms)
	// The gateway writes its state file; nothing else in the run writes.
	assert.Positive(t, sum.WriteCallBytesPerMsg, "bytes handed to write calls per message")
	// The bare subscriber ran on the same broker with the same publishers
	// and took every message it was sent.
	require.NotNil(t, sum.Bare)
	assert.Positive(t, sum.Bare.Published)
	assert.Equal(t, sum.Bare.Published, sum.Bare.Received)
	assert.Positive(t, sum.Bare.MsgPerSecond)
	assert.Positive(t, sum.Bare.PeakHeapBytes, "the tool's own heap: publishers, tracker, bare subscriber")
	assert.InDelta(t, sum.MsgPerSecond/sum.Bare.MsgPerSecond, sum.RatioToBare, 1e-9)
	require.NoError(t, sum.Check())
}

func TestRunEmbedded(t *testing.T) {
	var progress bytes.Buffer
	o := smallRun("")
	o.Progress, o.Every = &progress, 50*time.Millisecond
	sum, err := Run(context.Background(), o)
	require.NoError(t, err)
	checkSmall(t, sum)
	assert.Equal(t, "embedded", sum.Broker)

	var text bytes.Buffer
	require.NoError(t, sum.WriteText(&text))
	t.Log("\n" + text.String())
	assert.Contains(t, text.String(), "consistency       ok")
	b, err := json.Marshal(sum)
	require.NoError(t, err)
	var back map[string]any
	require.NoError(t, json.Unmarshal(b, &back))
	assert.EqualValues(t, 39, back["hours_closed"])
	assert.EqualValues(t, sum.Published, back["messages_acked"])
	if sum.PeakRSSBytes > 0 { // /proc/self/status is there
		assert.Positive(t, sum.PeakRSSAnonBytes, "anonymous memory: heap and stacks")
		assert.Positive(t, sum.PeakRSSFileBytes, "file-backed: the binary and the state file's mapped pages")
		assert.LessOrEqual(t, sum.PeakRSSAnonBytes, sum.PeakRSSBytes)
		assert.Contains(t, text.String(), "anonymous ")
	}
}

func TestRunMosquitto(t *testing.T) {
	sum, err := Run(context.Background(), smallRun(testenv.MQTT(t)))
	require.NoError(t, err)
	checkSmall(t, sum)
}

func TestCheckCatchesLoss(t *testing.T) {
	sum := Summary{Published: 10, Acked: 9, Handled: 10, InjectedBad: 1, Rejected: map[string]float64{"unparseable": 2},
		HoursClosed: 3, HoursExpected: 4, Records: 3, RecordsEmitted: 3}
	err := sum.Check()
	require.Error(t, err)
	for _, want := range []string{"acknowledged 9 of 10", "rejected 2 messages", "hours closed 3, expected 4"} {
		assert.ErrorContains(t, err, want)
	}
	var text bytes.Buffer
	require.NoError(t, sum.WriteText(&text))
	assert.Contains(t, text.String(), "consistency       FAILED")
}

func TestLoopbackOnly(t *testing.T) {
	for _, ok := range []string{"tcp://127.0.0.1:1883", "tcp://localhost:1883", "tcp://[::1]:1883", "mqtt://127.0.0.9:2000"} {
		assert.NoError(t, CheckLoopback(ok), ok)
	}
	for _, bad := range []string{"tcp://10.1.2.3:1883", "tcp://broker.example:1883", "tcp://0.0.0.0:1883"} {
		err := CheckLoopback(bad)
		assert.True(t, errors.Is(err, ErrNotLoopback), "%s: %v", bad, err)
	}
	for _, bad := range []string{"ssl://127.0.0.1:8883", "tcp://127.0.0.1", "127.0.0.1:1883", "ws://[::1]:9001"} {
		assert.Error(t, CheckLoopback(bad), bad)
	}
	_, err := Run(context.Background(), Options{BrokerURL: "tcp://192.0.2.1:1883"})
	require.ErrorIs(t, err, ErrNotLoopback)
	assert.ErrorContains(t, err, `"192.0.2.1"`)
}

func TestOptionsRejected(t *testing.T) {
	for _, o := range []Options{
		{Stations: -1}, {Duration: 11 * time.Minute}, {Interval: 10 * time.Minute}, {Interval: 1500 * time.Millisecond},
		{Rate: -5}, {Window: 100000}, {Messages: 10, Bad: 10}, {Stations: 10001, Messages: 1e6},
		{BareDuration: -time.Second},
	} {
		_, err := Run(context.Background(), o)
		assert.Error(t, err, "%+v", o)
	}
	_, err := Run(context.Background(), Options{Stations: 20, Messages: 30})
	assert.ErrorContains(t, err, "messages must be at least 41 for one reading of every sensor of 20 stations")
}

// TestTenThousandStations: the tool takes a network of 10,000 stations
// (it refused more than 1,000 before), without running it.
func TestTenThousandStations(t *testing.T) {
	o := Options{Stations: MaxStations, Messages: 1_000_000}
	require.NoError(t, o.Validate())
	f := newFarm(o.Stations, "r", o.Interval)
	assert.Len(t, f.stations, 10000)
	assert.Equal(t, "block-10000", f.stations[9999].id)
}

// TestFloorUnpaced: a --rate paces the gateway phase only; the bare phase
// measures the floor's top rate.
func TestFloorUnpaced(t *testing.T) {
	o := Options{Stations: 3, Rate: 50}
	require.NoError(t, o.Validate())
	pl, err := newPlan(newFarm(3, "r", o.Interval), o)
	require.NoError(t, err)
	assert.Zero(t, floorPlan(pl).rate)
	assert.Equal(t, 50.0, pl.rate, "the gateway phase's plan is left as it was")
	assert.Equal(t, pl.ticks, floorPlan(pl).ticks)
}

func TestHistogram(t *testing.T) {
	var h histogram
	assert.Zero(t, h.quantile(0.5))
	for i := 1; i <= 1000; i++ {
		h.add(time.Duration(i) * time.Millisecond)
	}
	// Buckets are 2 % wide: each quantile is within 2 % above the exact rank.
	assert.InEpsilon(t, float64(500*time.Millisecond), float64(h.quantile(0.5)), 0.021)
	assert.InEpsilon(t, float64(990*time.Millisecond), float64(h.quantile(0.99)), 0.021)
	assert.Equal(t, time.Second, h.quantile(1))
	assert.Equal(t, time.Second, h.max)
}

// TestStopBounded: a gateway that does not stop after its context is
// cancelled (a deadlock) ends the run with an error naming it and the
// goroutines' stacks, instead of hanging the load tool.
func TestStopBounded(t *testing.T) {
	done := make(chan struct{})
	close(done)
	require.NoError(t, waitStopped(done, time.Millisecond))

	err := waitStopped(make(chan struct{}), time.Millisecond)
	require.ErrorIs(t, err, ErrGatewayStuck)
	assert.ErrorContains(t, err, "did not stop within 1ms")
	assert.ErrorContains(t, err, "goroutine profile", "the stacks show where it hangs")
}
