package gateway

import (
	"context"
	"encoding/json"
	"log/slog"
	"math"
	"sort"
	"sync"
	"time"

	"etpulse/controllers"
	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/report"
	"etpulse/gateway/store"
	"etpulse/gateway/vocab"
	"etpulse/gateway/zones"
	"etpulse/hourly"
)

// statePublisher keeps the retained state topics current: per station a
// summary of its last hour (config.StationStateTopic), per zone its
// balance, levels, hold and next run (config.ZoneStateTopic), per site
// yesterday's morning report (config.ReportTopic). A topic is
// published (QoS 1, retained) only when its payload changed, so a late
// subscriber gets the current state at once and the broker sees few
// messages. It is a stepped service: RunOnce each minute and after every
// published record. A pass builds the payloads of the stations whose hour
// changed since the last one, not of every station, and the morning
// report at most once a minute: its cost does not grow with the network.
type statePublisher struct {
	prefix string
	pub    mqtt.Publisher
	zones  *zones.Service  // nil: no zones
	report *report.Builder // yesterday's report on config.ReportTopic; nil: none
	sites  []string
	clock  clock.Clock
	log    *slog.Logger
	wake   chan struct{}

	mu       sync.Mutex
	hours    map[[2]string]map[hourly.Reference]hourly.Record // latest hour per station, by reference
	dirty    map[[2]string]bool                               // stations whose payload is to build and publish
	sent     map[string]string                                // topic -> payload last published
	connects uint64                                           // the client's connect count when sent was valid

	reports  map[string]string // site's report topic -> its payload, as last built
	reportAt time.Time         // when the reports are next built
}

// connectCounter is implemented by a publisher that counts its connects
// (mqtt.Client): after a reconnect the broker may have lost its retained
// messages (a restart without persistence), so everything is sent again.
type connectCounter interface{ Connects() uint64 }

var _ clock.Stepper = (*statePublisher)(nil)

// wireStatePublisher adds the retained state publisher to comp.
func wireStatePublisher(cfg *config.Config, deps Deps, comp *Components) *statePublisher {
	p := newStatePublisher(cfg.TopicPrefix, deps.MQTT, deps.Clock, deps.Logger.With("component", "state-topics"), siteIDs(cfg))
	for _, h := range comp.Handlers {
		if z, ok := h.(*zones.Service); ok {
			p.zones = z
		}
	}
	src := report.Sources{Config: cfg, Now: deps.Clock.Now}
	for _, s := range comp.Services {
		if h, ok := s.(*store.History); ok {
			src.History = h
		}
	}
	if p.zones != nil {
		src.Zones = p.zones
	}
	if b, err := report.New(src); err == nil {
		p.report = b
	}
	comp.Services = append(comp.Services, p)
	return p
}

// newStatePublisher returns a state publisher without zones or reports.
func newStatePublisher(prefix string, pub mqtt.Publisher, clk clock.Clock, log *slog.Logger, sites []string) *statePublisher {
	return &statePublisher{prefix: prefix, pub: pub, clock: clk, log: log, wake: make(chan struct{}, 1), sites: sites,
		hours: map[[2]string]map[hourly.Reference]hourly.Record{}, dirty: map[[2]string]bool{}, sent: map[string]string{},
		reports: map[string]string{}}
}

// noteRecord keeps a published record as its station's latest hour (a
// revision of an older hour does not replace a newer one) and wakes the
// publisher.
func (p *statePublisher) noteRecord(rec hourly.Record) {
	if p == nil {
		return
	}
	k := [2]string{rec.Site, rec.Station}
	p.mu.Lock()
	refs := p.hours[k]
	for _, r := range refs {
		if rec.Start.Before(r.Start) {
			p.mu.Unlock()
			return
		}
		if rec.Start.After(r.Start) {
			refs = nil
		}
		break
	}
	if refs == nil {
		refs = map[hourly.Reference]hourly.Record{}
		p.hours[k] = refs
	}
	refs[rec.Reference] = rec
	p.dirty[k] = true
	p.mu.Unlock()
	select {
	case p.wake <- struct{}{}:
	default:
	}
}

// Run publishes the state topics until ctx ends.
func (p *statePublisher) Run(ctx context.Context) error {
	return clock.Loop(ctx, p.clock, p.wake, p)
}

// RunOnce publishes every state topic whose payload changed, and every one
// after the client reconnected; a topic that fails is retried at the next
// pass (at least every minute).
func (p *statePublisher) RunOnce(ctx context.Context, now time.Time) (time.Time, error) {
	if cc, ok := p.pub.(connectCounter); ok {
		if n := cc.Connects(); n != p.connects {
			p.mu.Lock()
			p.sent, p.connects = map[string]string{}, n
			for k := range p.hours {
				p.dirty[k] = true
			}
			p.mu.Unlock()
		}
	}
	msgs, stations, err := p.payloads(now)
	if err != nil {
		p.log.Warn("state topics: reading the zones", "err", err)
	}
	topics := make([]string, 0, len(msgs))
	for t := range msgs {
		topics = append(topics, t)
	}
	sort.Strings(topics)
	for _, t := range topics {
		p.mu.Lock()
		same := p.sent[t] == msgs[t]
		p.mu.Unlock()
		if same {
			continue
		}
		pctx, cancel := context.WithTimeout(ctx, 10*time.Second)
		err := p.pub.Publish(pctx, t, 1, true, []byte(msgs[t]))
		cancel()
		if err != nil {
			p.log.Warn("state topics: not published; will retry", "topic", t, "err", err)
			if k, ok := stations[t]; ok {
				p.mu.Lock()
				p.dirty[k] = true
				p.mu.Unlock()
			}
			continue
		}
		p.mu.Lock()
		p.sent[t] = msgs[t]
		p.mu.Unlock()
	}
	return now.Add(time.Minute), nil
}

// stationState is the retained payload of a station.
type stationState struct {
	FormatVersion int                `json:"format_version"` // vocab.FormatVersion
	Site          string             `json:"site"`
	Station       string             `json:"station"`
	HourStart     time.Time          `json:"hour_start"`
	LocalStart    string             `json:"local_start"`
	Revision      int                `json:"revision"`
	Complete      bool               `json:"complete"`
	Fill          string             `json:"fill,omitempty"`
	ETmm          map[string]float64 `json:"et_mm"` // per reference; absent when not computed
	RainMM        float64            `json:"rain_mm"`
	AirTempC      *float64           `json:"air_temp_c,omitempty"`
	EaKPa         *float64           `json:"ea_kpa,omitempty"`
	Wind2MS       *float64           `json:"wind_2m_m_s,omitempty"`
	SolarMJ       *float64           `json:"solar_mj_m2,omitempty"`
	Flags         []string           `json:"flags"`
}

// zoneState is the retained payload of a zone.
type zoneState struct {
	FormatVersion int         `json:"format_version"` // vocab.FormatVersion
	Site          string      `json:"site"`
	Zone          string      `json:"zone"`
	DepletionMM   float64     `json:"depletion_mm"`
	RAWMM         float64     `json:"raw_mm"`
	TAWMM         float64     `json:"taw_mm"`
	TriggerMM     float64     `json:"trigger_mm"`
	TargetMM      float64     `json:"target_mm"`
	Stressed      bool        `json:"stressed"` // depletion beyond RAW: Ks < 1 (FAO-56 eq. 84)
	LastValidET   *time.Time  `json:"last_valid_et"`
	Hold          *holdState  `json:"hold"`
	NextRun       *report.Run `json:"next_run"`
}

// newZoneState starts the retained payload of a zone.
func newZoneState(site, zone string) zoneState {
	return zoneState{FormatVersion: vocab.FormatVersion, Site: site, Zone: zone}
}

type holdState struct {
	Scope   string     `json:"scope"` // "site" or "zone"
	Until   *time.Time `json:"until"` // null: until released
	Reason  string     `json:"reason"`
	Forever bool       `json:"forever"`
}

// payloads builds the state topics' payloads at now: the stations whose
// hour changed since the last pass (stations maps their topics back), the
// sites' reports (built again once a minute), every zone.
func (p *statePublisher) payloads(now time.Time) (out map[string]string, stations map[string][2]string, err error) {
	out, stations = map[string]string{}, map[string][2]string{}
	encode := func(topic string, v any) (string, bool) {
		b, err := json.Marshal(v)
		if err != nil { // a non-finite number: keep the last good payload
			p.log.Warn("state topics: encode", "topic", topic, "err", err)
			return "", false
		}
		return string(b), true
	}
	put := func(topic string, v any) {
		if b, ok := encode(topic, v); ok {
			out[topic] = b
		}
	}
	p.mu.Lock()
	for k := range p.dirty {
		t := config.StationStateTopic(p.prefix, k[0], k[1])
		put(t, stationPayload(p.hours[k]))
		stations[t] = k
	}
	clear(p.dirty)
	p.mu.Unlock()
	if p.report != nil && (len(p.reports) == 0 || !now.Before(p.reportAt)) {
		p.reportAt = now.Add(time.Minute)
		for _, site := range p.sites {
			rep, err := p.report.Report(site, "")
			if err != nil {
				return out, stations, err
			}
			rep.Generated = time.Time{} // unchanged days are not published again
			t := config.ReportTopic(p.prefix, site)
			if b, ok := encode(t, rep); ok {
				p.reports[t] = b
			}
		}
	}
	for t, b := range p.reports {
		out[t] = b
	}
	if p.zones == nil {
		return out, stations, nil
	}
	sts, err := p.zones.Status(now)
	if err != nil {
		return out, stations, err
	}
	holds := map[string]controllers.Holds{}
	ledgers := map[string][]controllers.Command{}
	for _, zs := range sts {
		if _, ok := holds[zs.Site]; !ok {
			if holds[zs.Site], err = p.zones.Holds(zs.Site); err != nil {
				return out, stations, err
			}
			if ledgers[zs.Site], err = p.zones.Ledger(zs.Site); err != nil {
				return out, stations, err
			}
		}
		z := newZoneState(zs.Site, zs.Zone)
		z.DepletionMM, z.RAWMM, z.TAWMM, z.TriggerMM, z.TargetMM, z.Stressed = vocab.Round(vocab.DepletionMM, zs.State.Depletion),
			vocab.Round(vocab.RAWmm, zs.Levels.RAW), vocab.Round(vocab.TAWmm, zs.Levels.TAW),
			vocab.Round(vocab.TriggerMM, zs.Levels.Trigger), vocab.Round(vocab.TargetMM, zs.Levels.Target),
			zs.State.Depletion > zs.Levels.RAW
		if lv := zs.State.LastValid; !lv.IsZero() {
			lv = lv.UTC()
			z.LastValidET = &lv
		}
		h := holds[zs.Site]
		if hold, ok := h.For(zs.Zone, now); ok {
			z.Hold = &holdState{Scope: "zone", Reason: hold.Reason, Forever: hold.Forever}
			if h.Site.Active(now) {
				z.Hold.Scope = "site"
			}
			if !hold.Forever {
				u := hold.Until.UTC()
				z.Hold.Until = &u
			}
		}
		for _, c := range ledgers[zs.Site] {
			if c.Zone != zs.Zone || !c.State.Open() {
				continue
			}
			if z.NextRun == nil || c.Start.Before(z.NextRun.Start) {
				z.NextRun = &report.Run{ID: c.ID, Start: c.Start.UTC(), Minutes: c.Minutes, Cycle: c.Cycle, Cycles: c.Cycles, State: string(c.State)}
			}
		}
		put(config.ZoneStateTopic(p.prefix, zs.Site, zs.Zone), z)
	}
	return out, stations, nil
}

// stationPayload summarises a station's latest hour (one record per
// reference), numbers rounded to their quantity's precision.
func stationPayload(refs map[hourly.Reference]hourly.Record) stationState {
	s := stationState{FormatVersion: vocab.FormatVersion}
	s.ETmm = map[string]float64{}
	for ref, rec := range refs {
		s.Site, s.Station, s.HourStart, s.LocalStart = rec.Site, rec.Station, rec.Start.UTC(), rec.LocalStart
		s.Revision, s.Complete, s.Fill, s.RainMM = rec.Revision, rec.Complete, rec.Fill, vocab.Round(vocab.RainMM, rec.Rain)
		s.Flags = append([]string{}, rec.Flags...)
		if rec.Result != nil {
			s.ETmm[string(ref)] = vocab.Round(vocab.ETmm, rec.Result.ET)
			s.AirTempC = roundPtr(vocab.AirTempC, rec.Inputs.AirTemp)
			s.EaKPa = roundPtr(vocab.EaKPa, rec.Inputs.Ea)
			s.Wind2MS = roundPtr(vocab.Wind2mMS, rec.Inputs.Wind2)
			s.SolarMJ = roundPtr(vocab.SolarMJ, rec.Inputs.Solar)
		}
	}
	return s
}

// roundPtr is v rounded to the precision of the quantity name, or nil when
// v is not finite.
func roundPtr(name string, v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	r := vocab.Round(name, v)
	return &r
}
