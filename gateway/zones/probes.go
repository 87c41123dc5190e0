package zones

import (
	"fmt"
	"time"

	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/alert"
	"etpulse/hourly"
)

// probeKey names a probe channel: site, station, channel name.
type probeKey [3]string

// probeLatest keeps the latest reading of every probe channel, per zone
// (site/zone). Readings stay in memory: a probe reports again within its
// FreshHours, and the fusion state that matters is in the zone record.
type probeLatest map[string]map[string]controllers.ProbeReading

// newProbes indexes the zones' probe channels.
func (s *Service) newProbes() {
	s.probeRefs = map[probeKey][]*zoneRef{}
	s.probeLatest = probeLatest{}
	for _, ref := range s.zones {
		if ref.z.Probes == nil {
			continue
		}
		for _, p := range ref.z.Probes.Probes {
			k := probeKey{ref.site, ref.cfg.Station, p.ID}
			s.probeRefs[k] = append(s.probeRefs[k], ref)
		}
	}
}

// ObserveSample keeps the latest reading of each probe channel that a zone
// uses (pipeline.SampleObserver); other samples are ignored.
func (s *Service) ObserveSample(site, station string, smp hourly.Sample, now time.Time) {
	if smp.Quantity != hourly.SoilWater && smp.Quantity != hourly.SoilTension {
		return
	}
	refs := s.probeRefs[probeKey{site, station, smp.Sensor}]
	if len(refs) == 0 {
		return
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	for _, ref := range refs {
		k := ref.site + "/" + ref.id
		m := s.probeLatest[k]
		if m == nil {
			m = map[string]controllers.ProbeReading{}
			s.probeLatest[k] = m
		}
		if old, ok := m[smp.Sensor]; ok && old.Time.After(smp.Time) {
			continue // a late reading does not replace a newer one
		}
		m[smp.Sensor] = controllers.ProbeReading{Probe: smp.Sensor, Quantity: smp.Quantity, Value: smp.Value, Time: smp.Time}
	}
}

// SetProbeReading records a probe reading of zone (site/zone) as
// ObserveSample does; the backtest feeds its probe rows through it.
func (s *Service) SetProbeReading(site, zone string, r controllers.ProbeReading) {
	s.mu.Lock()
	defer s.mu.Unlock()
	k := site + "/" + zone
	if s.probeLatest[k] == nil {
		s.probeLatest[k] = map[string]controllers.ProbeReading{}
	}
	s.probeLatest[k][r.Probe] = r
}

// fuseProbes corrects the zone's balance after an hour step with its
// probes and raises or clears the probe alerts that changed, inside tx.
func (s *Service) fuseProbes(tx *bbolt.Tx, ref *zoneRef, st *controllers.State, step *controllers.Step) error {
	if ref.z.Probes == nil {
		return nil
	}
	s.mu.Lock()
	latest := make(map[string]controllers.ProbeReading, len(s.probeLatest[ref.site+"/"+ref.id]))
	for k, v := range s.probeLatest[ref.site+"/"+ref.id] {
		latest[k] = v
	}
	s.mu.Unlock()
	found, err := ref.z.FuseProbes(st, step, latest)
	if err != nil {
		// A reading the zone cannot use (a tension without a curve) is
		// logged; the hour stands on the model alone.
		s.log.Warn("zone probes not used", "site", ref.site, "zone", ref.id, "hour", step.Start, "err", err)
	}
	for _, f := range found {
		kind := alert.Kind(f.Kind)
		if f.Active {
			err = s.raise(tx, ref.site, ref.id, zoneAlert{kind: kind, severity: alert.SeverityWarning, message: f.Message, value: f.Value, limit: f.Limit}, step.End)
		} else {
			err = s.clear(tx, ref.site, ref.id, kind, step.End, f.Message, true)
		}
		if err != nil {
			return fmt.Errorf("zone %s probes: %w", ref.id, err)
		}
	}
	return nil
}

// probeFields adds the probes' fusion of a step to its store fields.
func probeFields(f map[string]any, st controllers.Step) {
	if st.Probe == nil {
		return
	}
	f["probe_depletion_mm"], f["probe_correction_mm"], f["probe_gain"], f["depletion_sd_mm"] =
		st.Probe.ProbeMM, st.Probe.CorrectionMM, st.Probe.Gain, st.Probe.SDMM
}
