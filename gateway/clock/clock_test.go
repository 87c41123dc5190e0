package clock_test

import (
	"context"
	"errors"
	"testing"
	"testing/synctest"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/clock"
)

// stepper records the instants of its passes and asks for the next one an
// hour later (or never, once its list of answers runs out).
type stepper struct {
	passes []time.Time
	every  time.Duration
	fail   error
}

func (s *stepper) RunOnce(_ context.Context, now time.Time) (time.Time, error) {
	s.passes = append(s.passes, now)
	if s.fail != nil && len(s.passes) == 3 {
		return time.Time{}, s.fail
	}
	if s.every == 0 {
		return time.Time{}, nil
	}
	return now.Add(s.every), nil
}

// TestLoopWakesAtNext: on the real clock (a synctest bubble), Loop runs a
// pass at once, then at each time RunOnce returned, and stops with ctx.
func TestLoopWakesAtNext(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		start := time.Now()
		s := &stepper{every: time.Hour}
		ctx, cancel := context.WithCancel(context.Background())
		done := make(chan error, 1)
		go func() { done <- clock.Loop(ctx, clock.Real, nil, s) }()
		time.Sleep(150 * time.Minute)
		synctest.Wait()
		cancel()
		require.NoError(t, <-done)
		assert.Equal(t, []time.Time{start, start.Add(time.Hour), start.Add(2 * time.Hour)}, s.passes)
	})
}

// TestLoopWake: a wake-up runs a pass at once even without a next time.
func TestLoopWake(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		start := time.Now()
		s := &stepper{}
		wake := make(chan struct{}, 1)
		ctx, cancel := context.WithCancel(context.Background())
		done := make(chan error, 1)
		go func() { done <- clock.Loop(ctx, clock.Real, wake, s) }()
		time.Sleep(time.Hour)
		synctest.Wait()
		wake <- struct{}{}
		synctest.Wait()
		cancel()
		require.NoError(t, <-done)
		assert.Equal(t, []time.Time{start, start.Add(time.Hour)}, s.passes)
	})
}

// TestLoopStopsOnError: a failing pass ends the loop with its error.
func TestLoopStopsOnError(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		boom := errors.New("boom")
		s := &stepper{every: time.Minute, fail: boom}
		err := clock.Loop(context.Background(), clock.Real, nil, s)
		require.ErrorIs(t, err, boom)
		assert.Len(t, s.passes, 3)
	})
}

// TestManualAfter: After fires only when Set reaches its deadline; Set never
// moves backwards.
func TestManualAfter(t *testing.T) {
	start := time.Date(2026, 1, 12, 0, 0, 0, 0, time.UTC)
	c := clock.NewManual(start)
	ch := c.After(time.Minute)
	c.Set(start.Add(30 * time.Second))
	select {
	case <-ch:
		t.Fatal("fired before its time")
	default:
	}
	c.Set(start.Add(time.Minute))
	assert.Equal(t, start.Add(time.Minute), <-ch)
	c.Set(start)
	assert.Equal(t, start.Add(time.Minute), c.Now(), "never backwards")
	assert.Equal(t, start.Add(time.Minute), <-c.After(0), "a due After fires at once")
}
