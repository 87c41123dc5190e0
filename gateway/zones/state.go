package zones

import (
	"encoding/json"
	"fmt"
	"time"

	"go.etcd.io/bbolt"

	"etpulse/controllers"
)

// Buckets of the state file owned by this package: one top-level bucket
// "zones" holding "state" (site/zone -> zoneRecord), "ledger" (site/command
// id -> controllers.Command) and "holds" (site/ or site/zone -> Hold).
var (
	bucketZones  = []byte("zones")
	bucketState  = []byte("state")
	bucketLedger = []byte("ledger")
	bucketHolds  = []byte("holds")
)

// zoneRecord is a zone's persisted state.
type zoneRecord struct {
	State controllers.State `json:"state"`
	// StaleAlert is true while the "no valid ET" alert is raised.
	StaleAlert bool `json:"stale_alert"`
	// Skip is the last reason the zone got no command (for change-only logs).
	Skip string `json:"skip,omitempty"`
}

type holdRecord struct {
	Until   time.Time `json:"until"`
	Forever bool      `json:"forever"`
	Reason  string    `json:"reason"`
}

type buckets struct {
	state, ledger, holds *bbolt.Bucket
}

func openBuckets(tx *bbolt.Tx) (buckets, error) {
	if !tx.Writable() {
		top := tx.Bucket(bucketZones)
		if top == nil {
			return buckets{}, nil
		}
		return buckets{top.Bucket(bucketState), top.Bucket(bucketLedger), top.Bucket(bucketHolds)}, nil
	}
	top, err := tx.CreateBucketIfNotExists(bucketZones)
	if err != nil {
		return buckets{}, fmt.Errorf("zones buckets: %w", err)
	}
	var b buckets
	for _, x := range []struct {
		name []byte
		dst  **bbolt.Bucket
	}{{bucketState, &b.state}, {bucketLedger, &b.ledger}, {bucketHolds, &b.holds}} {
		if *x.dst, err = top.CreateBucketIfNotExists(x.name); err != nil {
			return buckets{}, fmt.Errorf("zones buckets: %w", err)
		}
	}
	return b, nil
}

func key(site, id string) []byte { return []byte(site + "/" + id) }

func getJSON(b *bbolt.Bucket, k []byte, v any) (bool, error) {
	if b == nil {
		return false, nil
	}
	raw := b.Get(k)
	if raw == nil {
		return false, nil
	}
	if err := json.Unmarshal(raw, v); err != nil {
		return false, fmt.Errorf("decode %s: %w", k, err)
	}
	return true, nil
}

func putJSON(b *bbolt.Bucket, k []byte, v any) error {
	raw, err := json.Marshal(v)
	if err != nil {
		return fmt.Errorf("encode %s: %w", k, err)
	}
	if err := b.Put(k, raw); err != nil {
		return fmt.Errorf("put %s: %w", k, err)
	}
	return nil
}

// loadZone returns the zone's record, or a fresh one at the configured
// initial depletion.
func (s *Service) loadZone(b buckets, ref *zoneRef) (zoneRecord, error) {
	var r zoneRecord
	ok, err := getJSON(b.state, key(ref.site, ref.id), &r)
	if err != nil {
		return zoneRecord{}, err
	}
	if !ok {
		r.State.Depletion = ref.initial
	}
	return r, nil
}

// loadLedger returns every command of site, ordered by key.
func loadLedger(b buckets, site string) ([]controllers.Command, error) {
	var out []controllers.Command
	if b.ledger == nil {
		return nil, nil
	}
	prefix := []byte(site + "/")
	c := b.ledger.Cursor()
	for k, v := c.Seek(prefix); k != nil && len(k) >= len(prefix) && string(k[:len(prefix)]) == string(prefix); k, v = c.Next() {
		var cmd controllers.Command
		if err := json.Unmarshal(v, &cmd); err != nil {
			return nil, fmt.Errorf("decode command %s: %w", k, err)
		}
		out = append(out, cmd)
	}
	return out, nil
}

// loadHolds returns the holds of site.
func loadHolds(b buckets, site string) (controllers.Holds, error) {
	h := controllers.Holds{Zones: map[string]controllers.Hold{}}
	if b.holds == nil {
		return h, nil
	}
	prefix := site + "/"
	c := b.holds.Cursor()
	for k, v := c.Seek([]byte(prefix)); k != nil && len(k) >= len(prefix) && string(k[:len(prefix)]) == prefix; k, v = c.Next() {
		var r holdRecord
		if err := json.Unmarshal(v, &r); err != nil {
			return h, fmt.Errorf("decode hold %s: %w", k, err)
		}
		hold := controllers.Hold{Until: r.Until, Forever: r.Forever, Reason: r.Reason}
		if zone := string(k[len(prefix):]); zone == "" {
			h.Site = hold
		} else {
			h.Zones[zone] = hold
		}
	}
	return h, nil
}
