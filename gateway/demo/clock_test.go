package demo_test

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/demo"
)

// TestClockParksSteppedLoop: a parked loop (named by AfterFor) runs one pass per
// Release, at the time the demo chose; Set alone does not wake it; Unpark
// lets it sleep on simulated time again.
func TestClockParksSteppedLoop(t *testing.T) {
	const pkg = "probe"
	start := time.Date(2026, 1, 12, 0, 0, 0, 0, time.UTC)
	clock := demo.NewClock(start)
	clock.Park(pkg)
	after := clock.AfterFor(pkg)
	passes := make(chan time.Time, 10)
	stop := make(chan struct{})
	done := make(chan struct{})
	go func() {
		defer close(done)
		for {
			select {
			case at := <-after(time.Hour):
				passes <- at
			case <-stop:
				return
			}
		}
	}()
	<-clock.Parked(pkg)
	require.True(t, clock.IsParked(pkg))
	clock.Set(start.Add(2 * time.Hour))
	assert.Empty(t, passes, "a parked loop sleeps through Set")

	require.True(t, clock.Release(pkg))
	assert.Equal(t, start.Add(2*time.Hour), <-passes, "one pass at the clock's time")
	for !clock.IsParked(pkg) {
		<-clock.Parked(pkg)
	}
	assert.Empty(t, passes, "exactly one pass per release")

	clock.Unpark()
	close(stop)
	<-done
	assert.False(t, clock.Release(pkg), "nothing parked after Unpark")
}

// TestClockUnparkedAfter: loops not parked sleep on simulated time.
func TestClockUnparkedAfter(t *testing.T) {
	start := time.Date(2026, 1, 12, 0, 0, 0, 0, time.UTC)
	clock := demo.NewClock(start)
	clock.Park("zones")
	ch := clock.AfterFor("alerts")(time.Minute)
	clock.Set(start.Add(30 * time.Second))
	select {
	case <-ch:
		t.Fatal("fired before its time")
	default:
	}
	clock.Set(start.Add(time.Minute))
	assert.Equal(t, start.Add(time.Minute), <-ch)
}
