package zones

import (
	"encoding/json"
	"fmt"

	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/state"
)

// Buckets of the state file owned by this package (names and layout in
// gateway/state and its SCHEMA.md): one top-level bucket "zones" holding
// "state" (site/zone -> state.ZoneBalance), "ledger" (site/command id ->
// state.LedgerEntry), "holds" (site/ or site/zone -> state.HoldEntry) and
// "water" (applied water request ids).
var (
	bucketZones  = state.BucketZones
	bucketState  = state.BucketZoneState
	bucketLedger = state.BucketLedger
	bucketHolds  = state.BucketHolds
)

// zoneRecord is a zone's persisted state, stored as a state.ZoneBalance.
type zoneRecord struct {
	State controllers.State
	// StaleAlert is true while the "no valid ET" alert is raised.
	StaleAlert bool
	// Skip is the last reason the zone got no command (for change-only logs).
	Skip string
}

// holdRecord is a stored hold.
type holdRecord = state.HoldEntry

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
	var zb state.ZoneBalance
	ok, err := getJSON(b.state, key(ref.site, ref.id), &zb)
	if err != nil {
		return zoneRecord{}, err
	}
	if !ok {
		return zoneRecord{State: controllers.State{Depletion: ref.initial}}, nil
	}
	return zoneRecord{State: zb.State(), StaleAlert: zb.StaleAlert, Skip: zb.LastSkip}, nil
}

// putZone stores a zone's record.
func putZone(b buckets, site, zone string, zr *zoneRecord) error {
	return putJSON(b.state, key(site, zone), state.ZoneBalanceOf(zr.State, zr.StaleAlert, zr.Skip))
}

// putCommand stores a ledger entry.
func putCommand(b buckets, site string, c *controllers.Command) error {
	return putJSON(b.ledger, key(site, c.ID), state.LedgerEntryOf(*c))
}

// getCommand reads the ledger entry of command id of site.
func getCommand(b buckets, site, id string) (controllers.Command, bool, error) {
	var e state.LedgerEntry
	ok, err := getJSON(b.ledger, key(site, id), &e)
	if err != nil || !ok {
		return controllers.Command{}, false, err
	}
	return e.Command(), true, nil
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
		cmd, err := state.DecodeCommand(v)
		if err != nil {
			return nil, fmt.Errorf("%s: %w", k, err)
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
