package demo

import (
	"reflect"
	"runtime"
	"strings"
	"sync"
	"time"
)

// Clock is the demo's simulated clock: the gateway reads it and sleeps on it.
//
// By default After behaves like time.After on simulated time: its channel
// fires when Set moves the clock past the deadline. With Park, the loops of
// chosen packages are stepped instead: their After call parks the calling
// goroutine until the demo releases it, then returns a channel that has
// already fired. A parked loop cannot be woken by anything else (its other
// wake-up channels wait buffered), so the demo knows when it is idle and
// runs it at a simulated instant of its choosing, one loop at a time.
type Clock struct {
	mu      sync.Mutex
	now     time.Time
	waiters []waiter
	park    map[string]bool          // package path -> its After calls park
	parked  map[string]chan struct{} // package path -> closed to release its parked goroutine
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

// After fires once the simulated time has moved d past now; called from a
// parked package (Park), it first waits for Release.
func (c *Clock) After(d time.Duration) <-chan time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	if pkg := c.parkingCaller(); pkg != "" {
		gate := make(chan struct{})
		c.parked[pkg] = gate
		c.notifyLocked()
		c.mu.Unlock()
		<-gate
		c.mu.Lock()
		if c.park[pkg] {
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

// parkingCaller returns the package of After's caller when its calls park,
// else "". c.mu must be held.
func (c *Clock) parkingCaller() string {
	if len(c.park) == 0 {
		return ""
	}
	if pkg := callerPackage(); c.park[pkg] {
		return pkg
	}
	return ""
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

// Park makes After park its caller when called from code of one of the
// packages (import paths, e.g. "etpulse/gateway/zones"): each such package
// is expected to run one loop that calls After once per pass.
func (c *Clock) Park(pkgs ...string) {
	c.mu.Lock()
	defer c.mu.Unlock()
	for _, p := range pkgs {
		c.park[p] = true
	}
}

// Parked returns a channel closed once the loop of pkg is parked, or already
// closed when it is.
func (c *Clock) Parked(pkg string) <-chan struct{} {
	c.mu.Lock()
	defer c.mu.Unlock()
	if _, ok := c.parked[pkg]; ok {
		ch := make(chan struct{})
		close(ch)
		return ch
	}
	return c.changed
}

// IsParked reports whether the loop of pkg is parked in After.
func (c *Clock) IsParked(pkg string) bool {
	c.mu.Lock()
	defer c.mu.Unlock()
	_, ok := c.parked[pkg]
	return ok
}

// Release lets the parked loop of pkg run one pass at the current time: its
// After returns a channel that has fired. It reports whether a loop was
// parked.
func (c *Clock) Release(pkg string) bool {
	c.mu.Lock()
	defer c.mu.Unlock()
	gate, ok := c.parked[pkg]
	if ok {
		delete(c.parked, pkg)
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
	for pkg, gate := range c.parked {
		close(gate)
		delete(c.parked, pkg)
	}
	c.notifyLocked()
}

func (c *Clock) notifyLocked() {
	close(c.changed)
	c.changed = make(chan struct{})
}

// callerPackage returns the import path of the first function on the stack
// outside this package: the loop calling After.
func callerPackage() string {
	var pcs [8]uintptr
	n := runtime.Callers(2, pcs[:])
	frames := runtime.CallersFrames(pcs[:n])
	for {
		f, more := frames.Next()
		if pkg := funcPackage(f.Function); pkg != thisPackage {
			return pkg
		}
		if !more {
			return ""
		}
	}
}

// funcPackage returns the import path part of a fully qualified function
// name such as "etpulse/gateway/zones.(*Service).Run".
func funcPackage(fn string) string {
	slash := strings.LastIndexByte(fn, '/')
	if dot := strings.IndexByte(fn[slash+1:], '.'); dot >= 0 {
		return fn[:slash+1+dot]
	}
	return fn
}

var thisPackage = reflect.TypeFor[Clock]().PkgPath()
