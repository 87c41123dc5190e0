package state

import (
	"bytes"
	"fmt"
	"math"
	"strings"

	"go.etcd.io/bbolt"
)

// Store names before schema version 3 and after, frozen here (the store and
// gateway/vocab may rename again; this migration must not follow them).
var (
	// hourFieldsV3 renames the fields of an et_hour point. The measured
	// solar, stored as rs_mj_m2 before, is handled by renameHourV3.
	hourFieldsV3 = map[string]string{
		"t_air_c":      "air_temp_c",
		"u2_m_s":       "wind_2m_m_s",
		"p_kpa":        "pressure_kpa",
		"sun_elev_rad": "sun_elevation_rad",
		"rn_measured":  "net_rad_measured",
		"g_measured":   "soil_heat_measured",
	}
)

const (
	measHourV1       = "et_hour"
	measAlertV1      = "sensor_alert"
	measZoneAlertV3  = "zone_alert"
	zoneStationV1    = "zones" // the station of a zone alert raised through the alert monitor; its sensor is the zone
	solarCappedFlag  = "solar:capped-at-rso"
	fieldMeasuredRs  = "rs_mj_m2"
	fieldSolarV3     = "solar_mj_m2"
	fieldRsoV1       = "rso_mj_m2"
	noteFlagsV1      = "flags"
	flagSeparatorV1  = ";"
	enqueueTimeBytes = 8
)

// renamePointV3 turns a point stored before version 3 into its version-3
// form and reports whether it changed. An et_hour point gets the new field
// names; its old rs_mj_m2 (the measured, or estimated, solar) becomes
// solar_mj_m2, and rs_mj_m2 is then the solar used in the computation,
// which the old point determines: the solar floored at 0, or rso_mj_m2 when
// the hour's flags say an estimate was capped at the clear-sky value
// (hourly.Compute of every release that wrote version 1 or 2). A zone fault
// (sensor_alert of station "zones", or with a zone tag) becomes zone_alert
// tagged site, zone, quantity (when it had one) and kind. Every other point
// is unchanged.
func renamePointV3(p *pointV1) bool {
	switch p.Measurement {
	case measHourV1:
		return renameHourV3(p)
	case measAlertV1:
		return zoneAlertV3(p)
	}
	return false
}

func renameHourV3(p *pointV1) bool {
	if _, isNew := p.Fields[fieldSolarV3]; isNew {
		return false // written with the version-3 names already
	}
	changed := false
	for old, name := range hourFieldsV3 {
		if v, ok := p.Fields[old]; ok {
			delete(p.Fields, old)
			p.Fields[name] = v
			changed = true
		}
	}
	if v, ok := p.Fields[fieldMeasuredRs]; ok {
		p.Fields[fieldSolarV3] = v
		delete(p.Fields, fieldMeasuredRs)
		if used, ok := usedSolarV1(p, v); ok {
			p.Fields[fieldMeasuredRs] = used
		}
		changed = true
	}
	return changed
}

// usedSolarV1 is the solar radiation a version-1 or -2 hour was computed
// with, from its measured solar: floored at 0, and capped at rso_mj_m2 when
// the flags say so. ok is false when the point lacks what that needs.
func usedSolarV1(p *pointV1, measured any) (float64, bool) {
	rs, ok := measured.(float64)
	if !ok || math.IsNaN(rs) {
		return 0, false
	}
	rs = max(rs, 0)
	if capped := strings.Split(p.Notes[noteFlagsV1], flagSeparatorV1); contains(capped, solarCappedFlag) {
		rso, ok := p.Fields[fieldRsoV1].(float64)
		if !ok {
			return 0, false
		}
		rs = rso
	}
	return rs, true
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

func zoneAlertV3(p *pointV1) bool {
	zone := p.Tags["zone"]
	if p.Tags["station"] == zoneStationV1 {
		zone = p.Tags["sensor"]
	}
	if zone == "" {
		return false // a station's alert: stays sensor_alert
	}
	tags := map[string]string{"zone": zone}
	for _, k := range []string{"site", "quantity", "kind"} {
		if v := p.Tags[k]; v != "" {
			tags[k] = v
		}
	}
	p.Measurement, p.Tags = measZoneAlertV3, tags
	return true
}

// migratePointsV3 rewrites the stored points of the local history and the
// outbox to the version-3 names (renamePointV3). History keys are the
// point's series key, so a renamed zone fault moves to its new key (the
// time comes first, so the order is kept). Outbox entries keep their
// sequence key and enqueue time; outbox/series and outbox/raw, which name
// a pending point by its series key, follow it. The count in outbox/meta
// is unchanged (no point is added or removed). The quarantine keeps the
// text of points as the server refused them, and is not rewritten.
func migratePointsV3(tx *bbolt.Tx) error {
	if err := migrateHistoryV3(tx.Bucket(BucketHistory)); err != nil {
		return fmt.Errorf("history: %w", err)
	}
	if err := migrateOutboxV3(tx); err != nil {
		return fmt.Errorf("outbox: %w", err)
	}
	return nil
}

type keyValue struct{ k, v []byte }

func migrateHistoryV3(b *bbolt.Bucket) error {
	if b == nil {
		return nil
	}
	var dels [][]byte
	var puts []keyValue
	if err := b.ForEach(func(k, v []byte) error {
		p, err := decodePointV1(v)
		if err != nil {
			return nil // left as it is: reading it names the key
		}
		if !renamePointV3(&p) {
			return nil
		}
		nk := seriesKeyV1(p)
		if !bytes.Equal(nk, k) {
			dels = append(dels, bytes.Clone(k))
		}
		puts = append(puts, keyValue{nk, appendPointV1(nil, p)})
		return nil
	}); err != nil {
		return err
	}
	for _, k := range dels {
		if err := b.Delete(k); err != nil {
			return err
		}
	}
	for _, kv := range puts {
		if err := b.Put(kv.k, kv.v); err != nil {
			return err
		}
	}
	return nil
}

func migrateOutboxV3(tx *bbolt.Tx) error {
	ob := tx.Bucket(BucketOutbox)
	if ob == nil {
		return nil
	}
	series, raw := tx.Bucket(BucketOutboxSeries), tx.Bucket(BucketOutboxRaw)
	type moved struct{ seq, oldKey, newKey, value []byte }
	var out []moved
	if err := ob.ForEach(func(k, v []byte) error {
		if len(v) < enqueueTimeBytes {
			return nil // the drain quarantines an undecodable entry
		}
		p, err := decodePointV1(v[enqueueTimeBytes:])
		if err != nil {
			return nil // likewise
		}
		oldKey := seriesKeyV1(p)
		if !renamePointV3(&p) {
			return nil
		}
		nv := append(bytes.Clone(v[:enqueueTimeBytes]), appendPointV1(nil, p)...)
		out = append(out, moved{bytes.Clone(k), oldKey, seriesKeyV1(p), nv})
		return nil
	}); err != nil {
		return err
	}
	for _, m := range out {
		if err := ob.Put(m.seq, m.value); err != nil {
			return err
		}
		if bytes.Equal(m.oldKey, m.newKey) {
			continue
		}
		if series != nil && bytes.Equal(series.Get(m.oldKey), m.seq) {
			if err := series.Delete(m.oldKey); err != nil {
				return err
			}
			if err := series.Put(m.newKey, m.seq); err != nil {
				return err
			}
		}
		if raw != nil && raw.Get(m.seq) != nil {
			if err := raw.Put(m.seq, m.newKey); err != nil {
				return err
			}
		}
	}
	return nil
}
