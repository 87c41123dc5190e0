package zones

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"strings"
	"time"
	"unicode"

	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
)

// EventWater is water the gateway did not command (or a depletion reset)
// recorded in a zone's balance.
const EventWater EventKind = "water"

// Limits of the text of a WaterRequest.
const (
	maxWho = 64
	maxWhy = 256
)

// WaterRequest records water the gateway did not command, published on
// <prefix>/<site>/water (QoS 1). Kind "applied" (a run started at the
// controller, a hose, a tank) and "frost_protection" take exactly one of MM
// (net depth that reached the root zone), Minutes (run on the zone's own
// system: gross, net = minutes/60 x rate x efficiency) and VolumeL (metered:
// gross, net = litres / area x efficiency). Kind "depletion_reset" takes
// DepletionMM, a hand-measured depletion (mm below field capacity). Who and
// Why are required. Time (RFC 3339) is when the water was applied or the
// measurement taken; absent means now.
type WaterRequest struct {
	ID          string   `json:"id"` // the requester's id, echoed in the reply; a repeated id is applied once
	Zone        string   `json:"zone"`
	Kind        string   `json:"kind"` // applied, frost_protection or depletion_reset
	MM          *float64 `json:"mm,omitempty"`
	Minutes     *float64 `json:"minutes,omitempty"`
	VolumeL     *float64 `json:"volume_l,omitempty"`
	DepletionMM *float64 `json:"depletion_mm,omitempty"`
	Who         string   `json:"who"`
	Why         string   `json:"why"`
	Time        string   `json:"time,omitempty"`
}

// WaterReply answers a WaterRequest on <prefix>/<site>/water/reply. When OK,
// the depths say what the balance did: NetMM credited (0 for a reset),
// DrainageMM percolated below the root zone, the depletion before and after.
type WaterReply struct {
	ID          string   `json:"id"`
	OK          bool     `json:"ok"`
	Zone        string   `json:"zone,omitempty"`
	Kind        string   `json:"kind,omitempty"`
	NetMM       *float64 `json:"net_mm,omitempty"`
	DrainageMM  *float64 `json:"drainage_mm,omitempty"`
	PreviousMM  *float64 `json:"previous_depletion_mm,omitempty"`
	DepletionMM *float64 `json:"depletion_mm,omitempty"`
	// Duplicate: a request with this id was applied before (a redelivery
	// or a retry); nothing was applied again and the depths are absent.
	Duplicate bool   `json:"duplicate,omitempty"`
	Error     string `json:"error,omitempty"`
}

// DecodeWaterRequest parses and checks a water request: unknown keys, a
// missing or doubled amount, empty who/why are refused. Plausibility against
// the zone (TAW, time window) is checked when it is applied.
func DecodeWaterRequest(b []byte) (WaterRequest, error) {
	var r WaterRequest
	if err := decodeStrict(b, &r); err != nil {
		return WaterRequest{}, fmt.Errorf("decode water request: %w", err)
	}
	bad := func(format string, a ...any) (WaterRequest, error) {
		return WaterRequest{}, fmt.Errorf("decode water request: "+format, a...)
	}
	if r.ID == "" || len(r.ID) > 128 {
		return bad("id: required (1-128 bytes), so that a request delivered twice is applied once")
	}
	if r.Zone == "" || len(r.Zone) > 64 {
		return bad("zone: must name the zone (1-64 bytes), got %q", r.Zone)
	}
	for _, f := range []struct {
		name, v string
		max     int
	}{{"who", r.Who, maxWho}, {"why", r.Why, maxWhy}} {
		switch {
		case strings.TrimSpace(f.v) == "":
			return bad("%s: required: say who applied the water (or measured) and why", f.name)
		case len(f.v) > f.max:
			return bad("%s: longer than %d bytes; shorten it", f.name, f.max)
		case strings.IndexFunc(f.v, unicode.IsControl) >= 0:
			return bad("%s: control characters (line breaks, tabs) are not allowed", f.name)
		}
	}
	amounts := 0
	for _, p := range []*float64{r.MM, r.Minutes, r.VolumeL} {
		if p != nil {
			amounts++
		}
	}
	switch controllers.ManualKind(r.Kind) {
	case controllers.ManualApplied, controllers.ManualFrost:
		if amounts != 1 || r.DepletionMM != nil {
			return bad("kind %s: give exactly one of mm (net), minutes or volume_l, and no depletion_mm", r.Kind)
		}
	case controllers.ManualReset:
		if amounts != 0 || r.DepletionMM == nil {
			return bad("kind depletion_reset: give depletion_mm (mm below field capacity) and no mm, minutes or volume_l")
		}
	default:
		return bad("kind: must be applied, frost_protection or depletion_reset, got %q", r.Kind)
	}
	if r.Time != "" {
		if _, err := time.Parse(time.RFC3339, r.Time); err != nil {
			return bad("time: must be RFC 3339 with a zone, e.g. 2026-07-01T06:30:00-08:00, got %q", r.Time)
		}
	}
	return r, nil
}

// Manual converts a decoded request to the balance's terms.
func (r WaterRequest) Manual() controllers.ManualWater {
	w := controllers.ManualWater{Kind: controllers.ManualKind(r.Kind)}
	switch {
	case r.MM != nil:
		w.Amount, w.Unit = *r.MM, controllers.UnitNetMM
	case r.Minutes != nil:
		w.Amount, w.Unit = *r.Minutes, controllers.UnitMinutes
	case r.VolumeL != nil:
		w.Amount, w.Unit = *r.VolumeL, controllers.UnitVolumeL
	case r.DepletionMM != nil:
		w.Depletion = *r.DepletionMM
	}
	if r.Time != "" {
		w.At, _ = time.Parse(time.RFC3339, r.Time) // checked by DecodeWaterRequest
	}
	return w
}

// onWater applies water requests of a site and answers them.
func (s *Service) onWater(site *siteRef) func(mqtt.Message) {
	return func(m mqtt.Message) {
		if !s.fromTopic(m, config.WaterTopic(s.o.TopicPrefix, site.id), "water request", site.id) {
			return
		}
		reply := s.applyWater(site, m.Payload, s.o.Clock.Now())
		b, err := json.Marshal(reply)
		if err == nil {
			ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
			err = s.o.MQTT.Publish(ctx, config.WaterReplyTopic(s.o.TopicPrefix, site.id), 1, false, b)
			cancel()
		}
		if err != nil {
			s.log.Warn("water reply not published", "site", site.id, "id", reply.ID, "err", err)
		}
		m.Ack()
		s.poke()
	}
}

// errRefused marks a request refused for its content (not for storage).
var errRefused = errors.New("refused")

// applyWater applies a water request (as received on the water topic) at now
// in one transaction (zone state and a zone_step point carrying who and why)
// and returns the reply. A refused request changes nothing.
func (s *Service) applyWater(site *siteRef, payload []byte, now time.Time) WaterReply {
	req, err := DecodeWaterRequest(payload)
	if err != nil {
		s.log.Warn("water request refused", "site", site.id, "err", err)
		return WaterReply{Error: err.Error()}
	}
	reply := WaterReply{ID: req.ID, Zone: req.Zone, Kind: req.Kind}
	ref := s.zones[site.id+"/"+req.Zone]
	if ref == nil {
		reply.Error = fmt.Sprintf("zone: no zone %q in site %s; check the zone id in the configuration", req.Zone, site.id)
		s.log.Warn("water request refused", "site", site.id, "id", req.ID, "err", reply.Error)
		return reply
	}
	w := req.Manual()
	at := w.At
	if at.IsZero() {
		at = now
	}
	var step controllers.Step
	var prev float64
	var level controllers.State
	err = s.o.DB.Update(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		seen, err := waterSeen(tx, site.id, req, now)
		if err != nil || seen {
			reply.Duplicate = seen
			return err
		}
		if w.Kind == controllers.ManualReset {
			if err := resetConflict(b, site.id, req.Zone, at); err != nil {
				return err
			}
		}
		zr, err := s.loadZone(b, ref)
		if err != nil {
			return err
		}
		prev = zr.State.Depletion
		step, err = ref.z.ApplyWater(&zr.State, w, now)
		if err != nil {
			return fmt.Errorf("%w: %w", errRefused, err)
		}
		if err := putZone(b, ref.site, ref.id, &zr); err != nil {
			return err
		}
		p := stepPoint(ref.site, step)
		delete(p.Notes, "command")
		p.Notes["who"], p.Notes["why"], p.Notes["request"] = req.Who, req.Why, req.ID
		p.Notes["applied_at"] = at.UTC().Format(time.RFC3339)
		p.Fields["previous_depletion_mm"] = prev
		p.Fields["applied_unix"] = at.Unix()
		if err := s.enqueue(tx, p); err != nil {
			return err
		}
		level = zr.State
		return nil
	})
	if err != nil {
		if errors.Is(err, errRefused) {
			reply.Error = strings.TrimPrefix(err.Error(), errRefused.Error()+": ")
			s.log.Warn("water request refused", "site", site.id, "zone", req.Zone, "id", req.ID, "err", reply.Error)
		} else {
			reply.Error = "not stored: " + err.Error()
			s.log.Error("water request not stored", "site", site.id, "zone", req.Zone, "id", req.ID, "err", err)
		}
		return reply
	}
	reply.OK = true
	if reply.Duplicate {
		s.log.Info("water request already applied", "site", site.id, "zone", req.Zone, "id", req.ID)
		return reply
	}
	reply.setDepths(step.Irrigation, step.Drainage, prev, step.Depletion)
	s.m.setLevels(ref, &level, now)
	s.log.Info("water recorded", "site", site.id, "zone", req.Zone, "kind", req.Kind, "id", req.ID,
		"net_mm", step.Irrigation, "previous_depletion_mm", prev, "depletion_mm", step.Depletion,
		"applied_at", at, "who", req.Who, "why", req.Why)
	s.emit(Event{Time: now, Site: site.id, Zone: req.Zone, Kind: EventWater, Step: &step,
		Text: fmt.Sprintf("%s by %s: %s", req.Kind, req.Who, req.Why)})
	return reply
}

// resetConflict refuses a depletion measured at at when the zone's balance
// has since received water it cannot take back: a command credited after
// at, or a command running now (its report would credit water the
// measurement already saw, or not).
func resetConflict(b buckets, site, zone string, at time.Time) error {
	ledger, err := loadLedger(b, site)
	if err != nil {
		return err
	}
	for _, c := range ledger {
		if c.Zone != zone {
			continue
		}
		if c.Credited && c.EndedAt.After(at) {
			return fmt.Errorf("%w: depletion_reset: command %s was credited at %s, after the measurement at %s; measure again and record it with its time",
				errRefused, c.ID, c.EndedAt.UTC().Format(time.RFC3339), at.UTC().Format(time.RFC3339))
		}
		if c.State == controllers.Started {
			return fmt.Errorf("%w: depletion_reset: command %s is running; record the measurement after its report",
				errRefused, c.ID)
		}
	}
	return nil
}

// bucketWater (inside "zones") keeps the ids of applied water requests,
// site/zone/id -> RFC 3339 time applied, for ManualPast plus a day.
var bucketWater = state.BucketWater

// waterSeen reports whether req was applied before; if not, it records its
// id in tx (undone with tx when the request is refused) and forgets ids
// older than ManualPast plus a day.
func waterSeen(tx *bbolt.Tx, site string, req WaterRequest, now time.Time) (bool, error) {
	b, err := tx.Bucket(bucketZones).CreateBucketIfNotExists(bucketWater)
	if err != nil {
		return false, fmt.Errorf("water ids: %w", err)
	}
	k := []byte(site + "/" + req.Zone + "/" + req.ID)
	if b.Get(k) != nil {
		return true, nil
	}
	cut := now.Add(-controllers.ManualPast - 24*time.Hour)
	var old [][]byte
	_ = b.ForEach(func(k, v []byte) error {
		if t, err := time.Parse(time.RFC3339, string(v)); err != nil || t.Before(cut) {
			old = append(old, k)
		}
		return nil
	})
	for _, o := range old {
		if err := b.Delete(o); err != nil {
			return false, fmt.Errorf("water ids: %w", err)
		}
	}
	if err := b.Put(k, []byte(now.UTC().Format(time.RFC3339))); err != nil {
		return false, fmt.Errorf("water ids: %w", err)
	}
	return false, nil
}
