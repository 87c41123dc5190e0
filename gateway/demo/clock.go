package demo

import (
	"time"

	"etpulse/gateway/clock"
)

// Clock is the demo's simulated clock: it stands still between the demo's
// simulated minutes (clock.Manual).
type Clock = clock.Manual

// NewClock returns a simulated clock stopped at start.
func NewClock(start time.Time) *Clock { return clock.NewManual(start) }
