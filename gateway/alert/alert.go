// Package alert holds the alert vocabulary that several gateway packages
// share: the kinds of check, the severities, the key that names one alert
// (and so its retained topic), the alert state itself, and the Raiser
// interface through which a component raises and clears alerts inside its
// own transaction. It is a leaf: it imports no other gateway package, so the
// zone scheduler and the outbox watch can raise alerts without importing the
// sensor monitor that lifecycles them.
package alert

import (
	"fmt"
	"strings"
	"time"

	"go.etcd.io/bbolt"

	"etpulse/hourly"
)

// Kind names a check. Kinds are used as metric labels and as the last level
// of the alert topic, so they are few and fixed.
type Kind string

// The kinds raised by the sensor monitor (gateway/quality).
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

// The kinds other components raise through a Raiser: the zone scheduler
// (keys from ZoneKey) and the outbox watch (key from OutboxKey).
const (
	KindZoneETStale   Kind = "zone-et-stale"   // no valid ET for the zone for too long
	KindValveNoReport Kind = "valve-no-report" // a command (or its stop) got no final report
	KindValveFailed   Kind = "valve-failed"    // the valve controller reported a failed run
	KindValveOpen     Kind = "valve-open"      // a valve may be open: its stop is not confirmed
	KindValveOverrun  Kind = "valve-overrun"   // a report claims more minutes or water than commanded
	KindValveStopped  Kind = "valve-stopped"   // the controller stopped a run on its own (flow alarm, stop in the field)
	KindOutboxNearCap Kind = "outbox-near-cap" // the store outbox is close to its size cap
	KindFlowHigh      Kind = "flow-high"       // a flow meter reads more than the open valves pass (leak, burst)
	KindFlowLow       Kind = "flow-low"        // a flow meter reads less than the open valves pass (clog, closed valve, low pressure)
	KindFlowNoValve   Kind = "flow-no-valve"   // a flow meter reads flow with no valve commanded open (stuck valve, water taken)
	KindFlowVolume    Kind = "flow-volume"     // a run's metered volume differs from its reported or commanded volume
)

// The kinds the gateway's intake raises (key from StateKey) while it holds
// messages unacknowledged because the state file cannot be written.
const (
	KindStateDiskFull   Kind = "state-disk-full"   // the state file's disk is full (or its quota used up)
	KindStateWriteError Kind = "state-write-error" // the state file's disk fails writes (I/O error, read-only)
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

// StateKey returns the key of a site's state-file alert of the given kind:
// <prefix>/<site>/alerts/gateway/state/file/<kind>.
func StateKey(site string, kind Kind) Key {
	return Key{Site: site, Station: GatewayStation, Sensor: "state", Quantity: "file", Kind: kind}
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

// Raiser raises and clears alerts inside the caller's transaction, so an
// alert commits (or rolls back) with the change that caused it; a nil tx
// asks the Raiser to run its own. The gateway's drift and fault monitor
// (gateway/quality) is one: through it, alerts raised by other components
// get the retained alert topics, the alert metrics and the
// raise/update/clear lifecycle of every other alert.
type Raiser interface {
	// Raise raises (or updates) the alert a; a.Since is the time of the event.
	Raise(tx *bbolt.Tx, a Alert) error
	// Clear clears the alert with the given key at time at; message says why.
	Clear(tx *bbolt.Tx, key Key, at time.Time, message string) error
}
