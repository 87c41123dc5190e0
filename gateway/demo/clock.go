package demo

import (
	"sync"
	"time"
)

// Clock is the demo's simulated clock: the gateway reads it and sleeps on it.
//
// By default After behaves like time.After on simulated time: its channel
// fires when Set moves the clock past the deadline. With Park, chosen loops
// (named by AfterFor) are stepped instead: their After call parks the
// calling goroutine until the demo releases it, then returns a channel that
// has already fired. A parked loop cannot be woken by anything else (its other
// wake-up channels wait buffered), so the demo knows when it is idle and
// runs it at a simulated instant of its choosing, one loop at a time.
type Clock struct {
	mu      sync.Mutex
	now     time.Time
	waiters []waiter
	park    map[string]bool          // loop name -> its After calls park
	parked  map[string]chan struct{} // loop name -> closed to release its parked goroutine
	changed chan struct{}            // closed and replaced when parked changes
}

type waiter struct {
	at time.Time
	ch chan time.Time
}

// NewClock returns a clock stopped at start.
func NewClock(start time.Time) *Clock {
	return &Clock{now: start, park: map[string]bool{}, parked: map[string]chan struct{}{}, changed: make(chan struct{})}
}

// Now returns the simulated time.
func (c *Clock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

// After fires once the simulated time has moved d past now.
func (c *Clock) After(d time.Duration) <-chan time.Time { return c.after("", d) }

// AfterFor returns the After of the named loop (gateway.Deps.AfterFor):
// while the name is parked (Park), each call first waits for Release.
func (c *Clock) AfterFor(name string) func(time.Duration) <-chan time.Time {
	return func(d time.Duration) <-chan time.Time { return c.after(name, d) }
}

func (c *Clock) after(name string, d time.Duration) <-chan time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	if name != "" && c.park[name] {
		gate := make(chan struct{})
		c.parked[name] = gate
		c.notifyLocked()
		c.mu.Unlock()
		<-gate
		c.mu.Lock()
		if c.park[name] {
			ch := make(chan time.Time, 1)
			ch <- c.now
			return ch
		}
		// Unparked (the demo is stopping): sleep on simulated time.
	}
	ch := make(chan time.Time, 1)
	at := c.now.Add(d)
	if !at.After(c.now) {
		ch <- c.now
		return ch
	}
	c.waiters = append(c.waiters, waiter{at, ch})
	return ch
}

// Set moves the clock to t (never backwards) and fires due waiters. Parked
// goroutines stay parked.
func (c *Clock) Set(t time.Time) {
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

// Park makes the After of the named loops (AfterFor, e.g. "zones") park
// their caller: each is expected to be one loop that calls After once per
// pass.
func (c *Clock) Park(names ...string) {
	c.mu.Lock()
	defer c.mu.Unlock()
	for _, p := range names {
		c.park[p] = true
	}
}

// Parked returns a channel closed once the loop of name is parked, or already
// closed when it is.
func (c *Clock) Parked(name string) <-chan struct{} {
	c.mu.Lock()
	defer c.mu.Unlock()
	if _, ok := c.parked[name]; ok {
		ch := make(chan struct{})
		close(ch)
		return ch
	}
	return c.changed
}

// IsParked reports whether the loop of name is parked in After.
func (c *Clock) IsParked(name string) bool {
	c.mu.Lock()
	defer c.mu.Unlock()
	_, ok := c.parked[name]
	return ok
}

// Release lets the parked loop of name run one pass at the current time: its
// After returns a channel that has fired. It reports whether a loop was
// parked.
func (c *Clock) Release(name string) bool {
	c.mu.Lock()
	defer c.mu.Unlock()
	gate, ok := c.parked[name]
	if ok {
		delete(c.parked, name)
		close(gate)
	}
	return ok
}

// Unpark ends parking: parked loops wake and every later After sleeps on
// simulated time. The demo calls it before stopping the gateway, so the
// loops see their context end.
func (c *Clock) Unpark() {
	c.mu.Lock()
	defer c.mu.Unlock()
	clear(c.park)
	for name, gate := range c.parked {
		close(gate)
		delete(c.parked, name)
	}
	c.notifyLocked()
}

func (c *Clock) notifyLocked() {
	close(c.changed)
	c.changed = make(chan struct{})
}
