package config

import (
	"fmt"
	"math"
	"time"

	"etpulse/controllers"
)

// Meter is a flow meter of a site, on the pipe of one zone or on the main
// of one water source. It publishes on MeterTopic a flow rate (flow_l_min),
// a running volume (total_l) or a running pulse count (pulses, with
// LitresPerPulse).
type Meter struct {
	ID     string `yaml:"id"`
	Zone   string `yaml:"zone"`   // the zone it measures; or
	Source string `yaml:"source"` // the water source it measures
	// TolerancePct is the share, %, by which the measured flow may differ
	// from the expected one. Default 20.
	TolerancePct *float64 `yaml:"tolerance_pct"`
	// HighAfter, LowAfter and IdleAfter: how long a high flow, a low flow
	// and a flow with no valve open must last before they are alerted.
	// Defaults 2m, 5m, 5m.
	HighAfter *Duration `yaml:"high_after"`
	LowAfter  *Duration `yaml:"low_after"`
	IdleAfter *Duration `yaml:"idle_after"`
	// IdleFlowLMin is the flow below which the meter counts as still when
	// no valve is open. Default 1 L/min.
	IdleFlowLMin *float64 `yaml:"idle_flow_l_min"`
	// StopOnHigh stops the runs behind a high flow once it is alerted.
	StopOnHigh bool `yaml:"stop_on_high"`
	// SilentAfter: a meter whose latest reading is older is not judged.
	// Default 5m.
	SilentAfter *Duration `yaml:"silent_after"`
	// LitresPerPulse converts a pulse count; 0: pulses are refused.
	LitresPerPulse float64 `yaml:"litres_per_pulse"`
}

// The defaults of a meter (common practice, no source).
const (
	DefaultMeterTolerancePct = 20.0
	DefaultMeterHighAfter    = 2 * time.Minute
	DefaultMeterLowAfter     = 5 * time.Minute
	DefaultMeterIdleAfter    = 5 * time.Minute
	DefaultMeterIdleFlowLMin = 1.0
	DefaultMeterSilentAfter  = 5 * time.Minute
)

// MeterTopic is the topic of a meter's readings: <prefix>/<site>/meter/<meter>.
func MeterTopic(prefix, site, meter string) string { return prefix + "/" + site + "/meter/" + meter }

func orDuration(d *Duration, def time.Duration) time.Duration {
	if d == nil {
		return def
	}
	return d.D()
}

func orFloat(f *float64, def float64) float64 {
	if f == nil {
		return def
	}
	return *f
}

// Controller returns the meter for the controllers, defaults applied.
func (m *Meter) Controller() controllers.Meter {
	return controllers.Meter{
		ID: m.ID, Zone: m.Zone, Source: m.Source,
		Tolerance:  orFloat(m.TolerancePct, DefaultMeterTolerancePct) / 100,
		HighFor:    orDuration(m.HighAfter, DefaultMeterHighAfter),
		LowFor:     orDuration(m.LowAfter, DefaultMeterLowAfter),
		IdleFor:    orDuration(m.IdleAfter, DefaultMeterIdleAfter),
		IdleLMin:   orFloat(m.IdleFlowLMin, DefaultMeterIdleFlowLMin),
		StopOnHigh: m.StopOnHigh,
		Silent:     orDuration(m.SilentAfter, DefaultMeterSilentAfter),
	}
}

func (s *Site) validateMeters(path string, p *Problems) {
	ids := map[string]bool{}
	for j := range s.Meters {
		m := &s.Meters[j]
		mp := fmt.Sprintf("%s.meters[%d]", path, j)
		if !validID(m.ID) {
			p.Addf(mp+".id", "must be 1-64 characters of a-z, 0-9, '-' or '_', got %q", m.ID)
		} else if ids[m.ID] {
			p.Addf(mp+".id", "duplicate meter id %q", m.ID)
		}
		ids[m.ID] = true
		switch {
		case m.Zone == "" && m.Source == "":
			p.Add(mp, "set zone (a meter on one zone's pipe) or source (a meter on a water source's main)")
		case m.Zone != "" && m.Source != "":
			p.Addf(mp, "set zone or source, not both: got zone %q and source %q", m.Zone, m.Source)
		case m.Zone != "" && !s.hasZone(m.Zone):
			p.Addf(mp+".zone", "no zone %q in this site", m.Zone)
		case m.Source != "" && s.sourceByID(m.Source) == nil:
			p.Addf(mp+".source", "no water source %q in this site", m.Source)
		}
		c := m.Controller()
		if !(c.Tolerance >= controllers.MinFlowTolerance && c.Tolerance <= controllers.MaxFlowTolerance) {
			p.Addf(mp+".tolerance_pct", "must be within %s-%s, got %s", fmtF(controllers.MinFlowTolerance*100), fmtF(controllers.MaxFlowTolerance*100), fmtF(c.Tolerance*100))
		}
		for i, d := range []time.Duration{c.HighFor, c.LowFor, c.IdleFor} {
			if d < 0 || d > controllers.MaxFlowDelay {
				p.Addf(mp+"."+[]string{"high_after", "low_after", "idle_after"}[i], "must be within 0s-%v, got %v", controllers.MaxFlowDelay, d)
			}
		}
		if !(c.IdleLMin >= 0) || math.IsInf(c.IdleLMin, 0) {
			p.Addf(mp+".idle_flow_l_min", "must be >= 0, got %s", fmtF(c.IdleLMin))
		}
		if c.Silent <= 0 {
			p.Addf(mp+".silent_after", "must be > 0, got %v", c.Silent)
		}
		if !(m.LitresPerPulse >= 0) || math.IsInf(m.LitresPerPulse, 0) {
			p.Addf(mp+".litres_per_pulse", "must be >= 0 (0: the meter sends flow_l_min or total_l), got %s", fmtF(m.LitresPerPulse))
		}
	}
}

func (s *Site) hasZone(id string) bool {
	for i := range s.Zones {
		if s.Zones[i].ID == id {
			return true
		}
	}
	return false
}
