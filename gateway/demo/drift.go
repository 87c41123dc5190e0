package demo

import (
	"math"
	"time"

	"etpulse/gateway/quality"
)

// Drift of the demo's injected sensor fault: from noon of the first
// simulated day the orchard pyranometer's zero creeps upward (as with a
// failing signal conditioner) by DriftRate per hour, up to DriftMax. Dark
// hours then read well above zero and the night-time radiation check raises
// its alert during the first night; daytime readings carry the same offset.
const (
	DriftRate  = 4.0  // W m-2 per hour
	DriftMax   = 60.0 // W m-2
	DriftAfter = 12 * time.Hour
)

// DriftFaults returns the demo's injected fault for a run starting at start
// (local midnight): the orchard pyranometer's zero drift.
func DriftFaults(start time.Time) map[string]Fault {
	from := start.Add(DriftAfter)
	return map[string]Fault{
		Orchard + "/solar": func(t time.Time, v float64) float64 {
			if t.Before(from) {
				return v
			}
			return v + math.Min(DriftRate*t.Sub(from).Hours(), DriftMax)
		},
	}
}

// ShowAlerts is a demo Setup hook that prints every alert raised, updated
// or cleared as a line of the table.
func ShowAlerts(env *Env) error {
	env.Gateway.Alerts().Notify(func(ev quality.Event) {
		a := ev.Alert
		env.Table.Event(a.Updated, "alert %s: %s %s/%s %s (%s): %s",
			ev.Type, a.Station, a.Sensor, a.Quantity, a.Kind, a.Severity, a.Message)
	})
	return nil
}
