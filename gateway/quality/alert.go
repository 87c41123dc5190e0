// Package quality watches the weather sensors for faults and drift, keeps the
// lifecycle of the alerts it raises, and tells the pipeline which hours to
// flag or compute without a distrusted sensor.
//
// The checks come in two layers. Reading-level checks (range, spike, relative
// humidity above saturation, dew point above air temperature, silence) look
// at each accepted sample as it arrives. Hour-level checks (stuck value,
// night-time radiation offset, clear-sky envelope of radiation, nightly
// saturation, daytime calm runs, departure from neighbouring stations) look
// at a window of closed hours kept in the state file. Every check produces a
// Finding; Step turns findings into raised, updated and cleared alerts with
// hysteresis, and the Monitor persists, publishes and counts them.
package quality

import (
	"time"

	"etpulse/gateway/alert"
)

// Status is a check's verdict at one moment.
type Status int

// The verdicts.
const (
	// StatusHold: not enough evidence either way; an active alert stays, none is raised.
	StatusHold Status = iota
	// StatusBad: the fault is present.
	StatusBad
	// StatusGood: the fault is absent (beyond the hysteresis margin).
	StatusGood
)

func (s Status) String() string {
	switch s {
	case StatusBad:
		return "bad"
	case StatusGood:
		return "good"
	}
	return "hold"
}

// Finding is one check's verdict on one sensor quantity at time At.
type Finding struct {
	alert.Key
	Status   Status
	Severity alert.Severity
	Message  string
	Value    float64
	Limit    float64
	At       time.Time
	// ClearAfter is how long the fault must stay absent before an active
	// alert clears (time hysteresis); zero clears on the first good verdict.
	ClearAfter time.Duration
}

// EventType says what happened to an alert.
type EventType string

// The alert events.
const (
	EventRaised  EventType = "raised"
	EventUpdated EventType = "updated"
	EventCleared EventType = "cleared"
)

// Event is one change of an alert that is persisted, published and counted.
type Event struct {
	Type  EventType
	Alert alert.Alert
}

// Step applies a finding to the alert's previous state (has=false when no
// alert with the finding's key is active) and returns the new state, whether
// the state changed (and must be persisted), and the event to publish, if any.
//
// A bad verdict raises the alert once; while it stays active, evidence whose
// value changed (as shown in messages, about three significant digits) is
// published as an update at most every updateEvery, a severity change at
// once. A good verdict starts the clearing clock; the alert clears
// when good verdicts have lasted ClearAfter with no bad one in between. A hold
// verdict changes nothing.
func Step(prev alert.Alert, has bool, f Finding, updateEvery time.Duration) (next alert.Alert, changed bool, ev *Event) {
	if !has || !prev.Active() {
		if f.Status != StatusBad {
			return prev, false, nil
		}
		a := alert.Alert{
			Key: f.Key, Severity: f.Severity, Message: f.Message, Value: f.Value, Limit: f.Limit,
			Since: f.At, Updated: f.At,
		}
		return a, true, &Event{Type: EventRaised, Alert: a}
	}
	a := prev
	switch f.Status {
	case StatusBad:
		changed = !a.GoodSince.IsZero()
		a.GoodSince = time.Time{}
		sevChanged := f.Severity != a.Severity
		valueChanged := num(f.Value) != num(a.Value) && f.Value != a.Value
		if sevChanged || (valueChanged && f.At.Sub(a.Updated) >= updateEvery) {
			a.Severity, a.Message, a.Value, a.Limit, a.Updated = f.Severity, f.Message, f.Value, f.Limit, f.At
			return a, true, &Event{Type: EventUpdated, Alert: a}
		}
		return a, changed, nil
	case StatusGood:
		if a.GoodSince.IsZero() || f.At.Before(a.GoodSince) {
			a.GoodSince = f.At
			changed = true
		}
		if f.At.Sub(a.GoodSince) >= f.ClearAfter {
			a.Cleared = f.At
			a.Updated = f.At
			a.Message = "cleared: " + f.Message
			a.Value, a.Limit = f.Value, f.Limit
			return a, true, &Event{Type: EventCleared, Alert: a}
		}
		return a, changed, nil
	}
	return a, false, nil
}
