// Package clock is the gateway's one time seam. Every service reads the time
// and waits through a Clock, and does its periodic work in RunOnce(ctx, now):
// the daemon runs each such service in Loop on the wall clock, while the demo
// and tests call RunOnce themselves at the instants they choose.
package clock

import (
	"context"
	"sync"
	"time"
)

// Clock is the time as a service sees it.
type Clock interface {
	// Now returns the current time.
	Now() time.Time
	// After returns a channel that receives once d of this clock's time has
	// passed.
	After(d time.Duration) <-chan time.Time
}

// Real is the wall clock (inside a testing/synctest bubble, the bubble's
// fake clock).
var Real Clock = realClock{}

type realClock struct{}

func (realClock) Now() time.Time                         { return time.Now() }
func (realClock) After(d time.Duration) <-chan time.Time { return time.After(d) }

// Func adapts a function returning the time to a Clock whose After waits in
// real time: for callers that only read the time (replay, backtest, tests
// with a fixed now).
type Func func() time.Time

// Now calls f.
func (f Func) Now() time.Time { return f() }

// After waits d of real time.
func (f Func) After(d time.Duration) <-chan time.Time { return time.After(d) }

// Or returns c, or Real when c is nil.
func Or(c Clock) Clock {
	if c == nil {
		return Real
	}
	return c
}

// Stepper is a service whose periodic work is one pass at a given time.
type Stepper interface {
	// RunOnce does the work due at now and returns when the next pass is
	// due; a zero time means only a wake-up (new work) calls for one.
	RunOnce(ctx context.Context, now time.Time) (next time.Time, err error)
}

// Loop calls s.RunOnce at c.Now(), then again when the time it returned has
// come on c or when wake receives, until ctx ends (it then returns nil) or
// RunOnce fails (it returns that error).
func Loop(ctx context.Context, c Clock, wake <-chan struct{}, s Stepper) error {
	for {
		if ctx.Err() != nil {
			return nil
		}
		next, err := s.RunOnce(ctx, c.Now())
		if err != nil {
			if ctx.Err() != nil {
				return nil
			}
			return err
		}
		var due <-chan time.Time
		if !next.IsZero() {
			due = c.After(max(next.Sub(c.Now()), 0))
		}
		select {
		case <-ctx.Done():
			return nil
		case <-wake:
		case <-due:
		}
	}
}

// Manual is a simulated clock that stands still until Set moves it; its
// After channels fire as Set passes their deadlines.
type Manual struct {
	mu      sync.Mutex
	now     time.Time
	waiters []waiter
}

type waiter struct {
	at time.Time
	ch chan time.Time
}

var _ Clock = (*Manual)(nil)

// NewManual returns a clock stopped at start.
func NewManual(start time.Time) *Manual { return &Manual{now: start} }

// Now returns the simulated time.
func (c *Manual) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

// After fires once Set has moved the clock d past now (at once when d <= 0).
func (c *Manual) After(d time.Duration) <-chan time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	ch := make(chan time.Time, 1)
	at := c.now.Add(d)
	if !at.After(c.now) {
		ch <- c.now
		return ch
	}
	c.waiters = append(c.waiters, waiter{at, ch})
	return ch
}

// Set moves the clock to t (never backwards) and fires the due waiters.
func (c *Manual) Set(t time.Time) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if t.After(c.now) {
		c.now = t
	}
	kept := c.waiters[:0]
	for _, w := range c.waiters {
		if !w.at.After(c.now) {
			w.ch <- c.now
			continue
		}
		kept = append(kept, w)
	}
	c.waiters = kept
}
