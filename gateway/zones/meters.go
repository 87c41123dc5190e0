package zones

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"sync"
	"time"

	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/alert"
	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/store"
)

// meterKeep is how long a meter's readings stay in memory: the longest run
// (controllers.MaxRunMinutes) for the volume cross-check, plus an hour.
const meterKeep = controllers.MaxRunMinutes*time.Minute + time.Hour

// meterPointEvery is how often a meter's readings are written to the store
// as one point (mean flow and volume over the interval).
const meterPointEvery = time.Minute

// meterRef is one configured flow meter and its recent readings. Readings
// live in memory only: after a restart a condition is judged again from
// the first new readings, and the delays start over.
type meterRef struct {
	site  string
	cfg   *config.Meter
	m     controllers.Meter
	topic string

	mu        sync.Mutex
	samples   []controllers.FlowSample
	total     float64 // latest running volume, litres (total_l or pulses)
	totalAt   time.Time
	pointFrom time.Time // start of the interval the next store point covers
	kind      controllers.FlowKind
	reported  bool
	alerted   map[controllers.FlowKind]bool
	checked   map[string]bool // commands whose volume was cross-checked
}

// MeterMessage is the payload a flow meter publishes on
// <prefix>/<site>/meter/<meter>: exactly one of a flow rate over the
// interval since its previous message, a running volume, or a running pulse
// count (converted with the meter's litres_per_pulse).
type MeterMessage struct {
	FlowLMin *float64 `json:"flow_l_min,omitempty"`
	TotalL   *float64 `json:"total_l,omitempty"`
	Pulses   *float64 `json:"pulses,omitempty"`
}

// errMeter marks a meter message that can never apply.
var errMeter = errors.New("bad meter message")

// DecodeMeter decodes and checks a meter message; litresPerPulse converts
// pulses (0: pulses are refused). It returns the flow rate (isFlow) or the
// running volume in litres.
func DecodeMeter(b []byte, litresPerPulse float64) (v float64, isFlow bool, err error) {
	var m MeterMessage
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&m); err != nil {
		return 0, false, fmt.Errorf("decode meter message: %v (want {\"flow_l_min\": 42.5}, {\"total_l\": 12034.0} or {\"pulses\": 1203}): %w", err, errMeter)
	}
	n := 0
	for _, p := range []*float64{m.FlowLMin, m.TotalL, m.Pulses} {
		if p != nil {
			n++
			v = *p
		}
	}
	switch {
	case n != 1:
		return 0, false, fmt.Errorf("decode meter message: need exactly one of flow_l_min, total_l or pulses, got %d: %w", n, errMeter)
	case math.IsNaN(v) || math.IsInf(v, 0) || v < 0:
		return 0, false, fmt.Errorf("decode meter message: value must be a number >= 0, got %v: %w", v, errMeter)
	case m.Pulses != nil && litresPerPulse <= 0:
		return 0, false, fmt.Errorf("decode meter message: pulses: the meter has no litres_per_pulse in the configuration; set it or send total_l: %w", errMeter)
	case m.Pulses != nil:
		return v * litresPerPulse, false, nil
	}
	return v, m.FlowLMin != nil, nil
}

// newMeters builds the meters of every site.
func (s *Service) newMeters() {
	s.meters = map[string][]*meterRef{}
	for i := range s.o.Config.Sites {
		site := &s.o.Config.Sites[i]
		for j := range site.Meters {
			mc := &site.Meters[j]
			s.meters[site.ID] = append(s.meters[site.ID], &meterRef{site: site.ID, cfg: mc, m: mc.Controller(),
				topic: config.MeterTopic(s.o.TopicPrefix, site.ID, mc.ID), alerted: map[controllers.FlowKind]bool{}, checked: map[string]bool{}})
		}
	}
}

// subscribeMeters subscribes to the reading topic of every meter of site.
func (s *Service) subscribeMeters(site string) error {
	for _, mr := range s.meters[site] {
		if err := s.o.MQTT.Subscribe(mr.topic, 1, s.onMeter(mr)); err != nil {
			return fmt.Errorf("run zones: subscribe %s: %w", mr.topic, err)
		}
	}
	return nil
}

// onMeter handles a meter reading: kept in memory, written to the store
// once a minute, and the scheduler woken when the meter's condition
// changes (so an alert or a stop is decided at once, not at the next hour).
func (s *Service) onMeter(mr *meterRef) func(mqtt.Message) {
	return func(m mqtt.Message) {
		if !s.fromTopic(m, mr.topic, "meter reading", mr.site) {
			return
		}
		now := s.o.Clock.Now()
		v, isFlow, err := DecodeMeter(m.Payload, mr.cfg.LitresPerPulse)
		if err != nil {
			s.log.Warn("meter reading refused", "site", mr.site, "meter", mr.m.ID, "topic", m.Topic, "err", err)
			m.Ack()
			return
		}
		if err := s.applyMeter(mr, v, isFlow, now); err != nil {
			s.log.Error("meter reading not stored", "site", mr.site, "meter", mr.m.ID, "err", err)
			return // not acknowledged: the broker redelivers it
		}
		m.Ack()
	}
}

// applyMeter adds one reading at now.
func (s *Service) applyMeter(mr *meterRef, v float64, isFlow bool, now time.Time) error {
	mr.mu.Lock()
	flow, ok := v, isFlow
	if !isFlow {
		switch {
		case mr.totalAt.IsZero() || v < mr.total:
			if !mr.totalAt.IsZero() {
				s.log.Warn("meter total went back: counter reset, a new baseline", "site", mr.site, "meter", mr.m.ID, "was_l", mr.total, "now_l", v)
			}
		case now.After(mr.totalAt):
			flow, ok = (v-mr.total)/now.Sub(mr.totalAt).Minutes(), true
		}
		mr.total, mr.totalAt = v, now
	}
	if ok {
		mr.samples = append(mr.samples, controllers.FlowSample{Time: now, LMin: flow})
		cut := 0
		for cut < len(mr.samples) && now.Sub(mr.samples[cut].Time) > meterKeep {
			cut++
		}
		mr.samples = mr.samples[cut:]
	}
	var pt *store.Point
	if mr.pointFrom.IsZero() {
		mr.pointFrom = now
	} else if now.Sub(mr.pointFrom) >= meterPointEvery {
		if vol, ok := controllers.MeterVolume(mr.samples, mr.pointFrom, now); ok {
			secs := now.Sub(mr.pointFrom).Seconds()
			scope, id := "zone", mr.m.Zone
			if mr.m.Source != "" {
				scope, id = "source", mr.m.Source
			}
			p := store.FlowPoint(mr.site, mr.m.ID, scope, id, mr.pointFrom, vol/secs*60, vol, secs)
			pt = &p
		}
		mr.pointFrom = now
	}
	in := controllers.MeterInput{Meter: mr.m, Samples: append([]controllers.FlowSample(nil), mr.samples...)}
	mr.mu.Unlock()

	var fc controllers.FlowCheck
	check := func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil || b.ledger == nil {
			return err
		}
		ledger, err := loadLedger(b, mr.site)
		if err != nil {
			return err
		}
		fc = controllers.CheckFlow(now, in, ledger)
		return nil
	}
	var err error
	if pt != nil && s.o.Store != nil {
		err = s.o.DB.Update(func(tx *bbolt.Tx) error {
			if err := s.enqueue(tx, *pt); err != nil {
				return err
			}
			return check(tx)
		})
	} else {
		err = s.o.DB.View(check)
	}
	if err != nil {
		return fmt.Errorf("meter %s: %w", mr.m.ID, err)
	}
	mr.mu.Lock()
	changed := fc.Kind != mr.kind || fc.Reported != mr.reported
	mr.kind, mr.reported = fc.Kind, fc.Reported
	mr.mu.Unlock()
	if changed {
		s.poke()
	}
	return nil
}

// meterInputs returns the meters of site with a copy of their readings.
func (s *Service) meterInputs(site string) []controllers.MeterInput {
	var out []controllers.MeterInput
	for _, mr := range s.meters[site] {
		mr.mu.Lock()
		out = append(out, controllers.MeterInput{Meter: mr.m, Samples: append([]controllers.FlowSample(nil), mr.samples...)})
		mr.mu.Unlock()
	}
	return out
}

// flowAlertKinds maps a meter condition to its alert kind.
var flowAlertKinds = map[controllers.FlowKind]alert.Kind{
	controllers.FlowHigh: alert.KindFlowHigh,
	controllers.FlowLow:  alert.KindFlowLow,
	controllers.FlowIdle: alert.KindFlowNoValve,
}

// alertZone is the zone slot of a meter's alert key: the zone it measures,
// or the meter's own id for a meter on a water source.
func (mr *meterRef) alertZone() string {
	if mr.m.Zone != "" {
		return mr.m.Zone
	}
	return mr.m.ID
}

// noteFlows raises the alerts of the meter conditions Decide reported,
// clears those no longer reported, and cross-checks the volume of runs
// that ended on a zone's meter. It runs inside the tick's transaction.
func (s *Service) noteFlows(tx *bbolt.Tx, site string, flows []controllers.FlowCheck, ledger []controllers.Command, now time.Time) ([]Event, error) {
	var events []Event
	for _, mr := range s.meters[site] {
		var fc controllers.FlowCheck
		for _, f := range flows {
			if f.Meter == mr.m.ID && f.Reported {
				fc = f
			}
		}
		mr.mu.Lock()
		alerted := map[controllers.FlowKind]bool{}
		for k, v := range mr.alerted {
			alerted[k] = v
		}
		mr.mu.Unlock()
		zone := mr.alertZone()
		for k, kind := range flowAlertKinds {
			switch {
			case k == fc.Kind && !alerted[k]:
				sev := alert.SeverityWarning
				if k != controllers.FlowLow {
					sev = alert.SeverityCritical
				}
				s.log.Warn("flow alert", "site", site, "meter", mr.m.ID, "kind", kind, "text", fc.Text)
				if err := s.raise(tx, site, zone, zoneAlert{kind: kind, severity: sev, message: fc.Text, value: fc.Measured, limit: fc.Expected}, now); err != nil {
					return nil, err
				}
				alerted[k] = true
				events = append(events, Event{Time: now, Site: site, Zone: zone, Kind: EventAlert, Text: fc.Text})
			case k != fc.Kind && alerted[k]:
				text := fmt.Sprintf("meter %s: flow back within %.0f %% of the expected", mr.m.ID, mr.m.Tolerance*100)
				if err := s.clear(tx, site, zone, kind, now, text, false); err != nil {
					return nil, err
				}
				delete(alerted, k)
				events = append(events, Event{Time: now, Site: site, Zone: zone, Kind: EventAlert, Text: text})
			}
		}
		ev, err := s.crossCheck(tx, mr, ledger, now)
		if err != nil {
			return nil, err
		}
		events = append(events, ev...)
		tx.OnCommit(func() {
			mr.mu.Lock()
			mr.alerted = alerted
			mr.mu.Unlock()
		})
	}
	return events, nil
}

// crossCheck compares the volume of each run that ended on a zone's meter
// (once the readings cover it) with the volume the controller reported, or
// else the minutes run times the zone's flow; a difference beyond the
// meter's tolerance is alerted.
func (s *Service) crossCheck(tx *bbolt.Tx, mr *meterRef, ledger []controllers.Command, now time.Time) ([]Event, error) {
	if mr.m.Zone == "" {
		return nil, nil // a source meter's volume mixes the zones on it
	}
	var events []Event
	for i := range ledger {
		c := &ledger[i]
		if c.Zone != mr.m.Zone || c.StartedAt.IsZero() || c.EndedAt.IsZero() || now.Sub(c.EndedAt) > meterKeep {
			continue
		}
		mr.mu.Lock()
		done := mr.checked[c.ID]
		vol, ok := controllers.MeterVolume(mr.samples, c.StartedAt, c.EndedAt)
		if ok {
			mr.checked[c.ID] = true
		}
		mr.mu.Unlock()
		if done || !ok {
			continue
		}
		want, what := c.VolumeL, "reported"
		if want <= 0 {
			want, what = c.MinutesRun*c.Flow, "commanded"
		}
		s.log.Info("run volume metered", "site", mr.site, "meter", mr.m.ID, "id", c.ID, "metered_l", math.Round(vol), what+"_l", math.Round(want))
		if want > 0 && math.Abs(vol-want) > mr.m.Tolerance*want {
			text := fmt.Sprintf("run %s: meter %s measured %.0f L, %s %.0f L (%+.0f %%)", c.ID, mr.m.ID, vol, what, want, 100*(vol/want-1))
			if err := s.raise(tx, mr.site, mr.m.Zone, zoneAlert{kind: alert.KindFlowVolume, severity: alert.SeverityWarning, message: text, value: vol, limit: want}, now); err != nil {
				return nil, err
			}
			events = append(events, Event{Time: now, Site: mr.site, Zone: mr.m.Zone, Kind: EventAlert, Text: text})
		}
	}
	return events, nil
}
