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
	"fmt"
	"strings"
	"time"

	"etpulse/hourly"
)

// Kind names a check. Kinds are used as metric labels and as the last level
// of the alert topic, so they are few and fixed (plus the kinds other
// components raise through Monitor.Raise).
type Kind string

// The kinds raised by this package.
const (
	KindRange         Kind = "range"           // reading outside the plausible range
	KindSpike         Kind = "spike"           // change per minute beyond the limit
	KindRHHigh        Kind = "rh-above-100"    // relative humidity above 100 % beyond tolerance
	KindDewAboveAir   Kind = "dew-above-air"   // dew point above air temperature beyond tolerance
	KindSilence       Kind = "silence"         // no reading for too long
	KindStuck         Kind = "stuck"           // no change over too many hours
	KindNightSolar    Kind = "night-solar"     // radiation well above zero in dark hours
	KindSolarLow      Kind = "solar-low"       // clear-day radiation well below the clear-sky envelope
	KindSolarHigh     Kind = "solar-high"      // radiation above the clear-sky envelope
	KindHumidityDrift Kind = "humidity-drift"  // nights no longer reach saturation
	KindCalm          Kind = "calm-run"        // long daytime run of calm readings
	KindNeighbours    Kind = "station-departs" // station departs from the others' median
)

// The kinds the zone scheduler raises through Monitor.Raise (keys from
// ZoneKey).
const (
	KindZoneETStale   Kind = "zone-et-stale"   // no valid ET for the zone for too long
	KindValveNoReport Kind = "valve-no-report" // a command (or its stop) got no final report
	KindValveFailed   Kind = "valve-failed"    // the valve controller reported a failed run
	KindValveOpen     Kind = "valve-open"      // a valve may be open: its stop is not confirmed
	KindValveOverrun  Kind = "valve-overrun"   // a report claims more minutes or water than commanded
	KindValveStopped  Kind = "valve-stopped"   // the controller stopped a run on its own (flow alarm, stop in the field)
	KindOutboxNearCap Kind = "outbox-near-cap" // the store outbox is close to its size cap
)

// ZoneStation is the Station of alerts about an irrigation zone rather than
// a weather station; their Sensor is the zone id. The configuration refuses
// "zones" as a station id, so a zone alert never gates a station's hours.
const ZoneStation = "zones"

// The Quantity of zone alerts: the zone's ET, or its valve.
const (
	ZoneET    hourly.Quantity = "et"
	ZoneValve hourly.Quantity = "valve"
)

// ZoneKey returns the key of a zone alert of the given kind: Station
// ZoneStation, Sensor the zone id, Quantity ZoneET for KindZoneETStale and
// ZoneValve otherwise. Its topic is <prefix>/<site>/alerts/zones/<zone>/<et|valve>/<kind>.
func ZoneKey(site, zone string, kind Kind) Key {
	q := ZoneValve
	if kind == KindZoneETStale {
		q = ZoneET
	}
	return Key{Site: site, Station: ZoneStation, Sensor: zone, Quantity: q, Kind: kind}
}

// Zone returns the zone id of a zone alert's key, or "" for a station alert.
func (k Key) Zone() string {
	if k.Station == ZoneStation {
		return k.Sensor
	}
	return ""
}

// GatewayStation is the Station of alerts about the gateway itself rather
// than a weather station or a zone (e.g. its store outbox). The
// configuration refuses it as a station id.
const GatewayStation = "gateway"

// OutboxKey returns the key of a site's outbox alert:
// <prefix>/<site>/alerts/gateway/outbox/points/outbox-near-cap.
func OutboxKey(site string) Key {
	return Key{Site: site, Station: GatewayStation, Sensor: "outbox", Quantity: "points", Kind: KindOutboxNearCap}
}

// HourSubject is the Sensor of alerts derived from a station's hourly
// records rather than from one sensor's readings.
const HourSubject = "hourly"

// Severity grades an alert.
type Severity string

// The severities.
const (
	SeverityWarning  Severity = "warning"  // data suspect; hours are flagged
	SeverityCritical Severity = "critical" // data wrong; the configured response applies
)

// Key identifies one alert: one check on one sensor quantity of one station.
type Key struct {
	Site     string          `json:"site"`
	Station  string          `json:"station"`
	Sensor   string          `json:"sensor"`   // sensor id, or HourSubject
	Quantity hourly.Quantity `json:"quantity"` // the measured quantity concerned
	Kind     Kind            `json:"kind"`
}

// String returns the key as "site/station/sensor/quantity/kind".
func (k Key) String() string {
	return strings.Join([]string{k.Site, k.Station, k.Sensor, string(k.Quantity), string(k.Kind)}, "/")
}

// Validate reports whether every part of the key is a usable topic level.
func (k Key) Validate() error {
	for _, p := range [][2]string{
		{"site", k.Site}, {"station", k.Station}, {"sensor", k.Sensor},
		{"quantity", string(k.Quantity)}, {"kind", string(k.Kind)},
	} {
		if p[1] == "" || strings.ContainsAny(p[1], "/+#\x00") {
			return fmt.Errorf("alert key: %s must be a non-empty topic level without '/', '+' or '#', got %q", p[0], p[1])
		}
	}
	return nil
}

// Alert is the state of one alert. An alert is active until Cleared is set.
type Alert struct {
	Key
	Severity Severity  `json:"severity"`
	Message  string    `json:"message"`          // the evidence, e.g. "max Rs/Rso over the last 7 days 0.78, expected >= 0.85"
	Value    float64   `json:"value"`            // the measured value the message names (silence: unix time of the last reading)
	Limit    float64   `json:"limit"`            // the limit it was compared with
	Since    time.Time `json:"since"`            // when it was raised
	Updated  time.Time `json:"updated"`          // when its evidence was last published
	Cleared  time.Time `json:"cleared,omitzero"` // when it cleared; zero while active
	// GoodSince is when the fault was first seen absent while the alert was
	// active; the alert clears once it has stayed absent for the finding's
	// ClearAfter.
	GoodSince time.Time `json:"good_since,omitzero"`
}

// Active reports whether the alert has not cleared.
func (a Alert) Active() bool { return a.Cleared.IsZero() }

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
	Key
	Status   Status
	Severity Severity
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
	Alert Alert
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
func Step(prev Alert, has bool, f Finding, updateEvery time.Duration) (next Alert, changed bool, ev *Event) {
	if !has || !prev.Active() {
		if f.Status != StatusBad {
			return prev, false, nil
		}
		a := Alert{
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
