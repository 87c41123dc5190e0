package state

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"time"

	"go.etcd.io/bbolt"
)

// migrations[v] turns a file of version v into version v+1, inside the
// transaction Open gives it.
var migrations = map[int]func(*bbolt.Tx) error{
	1: migrate1to2,
	2: migrate2to3,
}

// migrate runs the migrations from version from up to Version and records
// the new version, all in tx.
func migrate(tx *bbolt.Tx, from int) error {
	for v := from; v < Version; v++ {
		m := migrations[v]
		if m == nil {
			return fmt.Errorf("no migration from version %d", v)
		}
		if err := m(tx); err != nil {
			return fmt.Errorf("version %d to %d: %w", v, v+1, err)
		}
	}
	return setVersion(tx, Version)
}

// commandV1 is a ledger entry as version 1 stored it: the JSON of the
// domain type of that release (controllers.Command), frozen here so that the
// domain type may change.
type commandV1 struct {
	ID      string    `json:"id"`
	Zone    string    `json:"zone"`
	Valve   string    `json:"valve"`
	Source  string    `json:"source"`
	Minutes int       `json:"minutes"`
	Start   time.Time `json:"start"`
	Expiry  time.Time `json:"expiry"`
	Cycle   int       `json:"cycle"`
	Cycles  int       `json:"cycles"`
	Reason  struct {
		DepletionMM    float64 `json:"depletion_mm"`
		TriggerMM      float64 `json:"trigger_mm"`
		EtcSinceLastMM float64 `json:"etc_since_last_mm"`
		Basis          string  `json:"basis"`
		ProjectedMM    float64 `json:"projected_mm"`
		ShortMM        float64 `json:"short_mm"`
	} `json:"reason"`
	Rate         float64   `json:"rate_mm_h"`
	Efficiency   float64   `json:"efficiency"`
	Area         float64   `json:"area_m2"`
	Flow         float64   `json:"flow_l_min"`
	State        string    `json:"state"`
	Attempts     int       `json:"attempts"`
	SentAt       time.Time `json:"sent_at"`
	StartedAt    time.Time `json:"started_at"`
	EndedAt      time.Time `json:"ended_at"`
	MinutesRun   float64   `json:"minutes_run"`
	RunKnown     bool      `json:"run_known"`
	VolumeL      float64   `json:"volume_l"`
	CreditMM     float64   `json:"credit_mm"`
	Credited     bool      `json:"credited"`
	Note         string    `json:"note"`
	StopAt       time.Time `json:"stop_at"`
	StopReason   string    `json:"stop_reason"`
	StopAttempts int       `json:"stop_attempts"`
	StopSentAt   time.Time `json:"stop_sent_at"`
}

func (c commandV1) v2() LedgerEntry {
	r := c.Reason
	e := LedgerEntry{ID: c.ID, Zone: c.Zone, Valve: c.Valve, Source: c.Source, State: c.State,
		Plan: LedgerPlan{Start: c.Start, Expiry: c.Expiry, Minutes: c.Minutes, Cycle: c.Cycle, Cycles: c.Cycles,
			Basis: r.Basis, DepletionMM: r.DepletionMM, TriggerMM: r.TriggerMM, EtcSinceLastMM: r.EtcSinceLastMM,
			ProjectedMM: r.ProjectedMM, ShortMM: r.ShortMM,
			RateMMH: c.Rate, Efficiency: c.Efficiency, AreaM2: c.Area, FlowLMin: c.Flow},
		Sends: LedgerSends{Count: c.Attempts, LastAt: c.SentAt},
		Run: LedgerRun{StartedAt: c.StartedAt, EndedAt: c.EndedAt, Minutes: c.MinutesRun, MinutesKnown: c.RunKnown,
			VolumeL: c.VolumeL, CreditMM: c.CreditMM, Credited: c.Credited, Note: c.Note},
	}
	if !c.StopAt.IsZero() {
		e.Stop = &LedgerStop{At: c.StopAt, Reason: c.StopReason, Count: c.StopAttempts, LastAt: c.StopSentAt}
	}
	return e
}

// zoneV1 is a zone record as version 1 stored it (the zones package's
// record around the JSON of that release's controllers.State).
type zoneV1 struct {
	State struct {
		Depletion float64 `json:"depletion"`
		Hours     []struct {
			Start    time.Time `json:"start"`
			Revision int       `json:"revision"`
			Valid    bool      `json:"valid"`
			Fallback bool      `json:"fallback"`
			ET       float64   `json:"et"`
			Kc       float64   `json:"kc"`
			Ks       float64   `json:"ks"`
			ETc      float64   `json:"etc"`
			ETcPot   float64   `json:"etc_pot"`
			Rain     float64   `json:"rain"`
			EffRain  float64   `json:"eff_rain"`
			Drainage float64   `json:"drainage"`
			Wind2    float64   `json:"wind2"`
			AirTemp  float64   `json:"air_temp"`
			HasWind  bool      `json:"has_wind"`
			HasTemp  bool      `json:"has_temp"`
		} `json:"hours"`
		LastValid   time.Time `json:"last_valid"`
		EtcSinceRun float64   `json:"etc_since_run"`
	} `json:"state"`
	StaleAlert bool   `json:"stale_alert"`
	Skip       string `json:"skip"`
}

func (z zoneV1) v2() ZoneBalance {
	s := z.State
	b := ZoneBalance{DepletionMM: s.Depletion, LastValidET: s.LastValid, ETcSinceRunMM: s.EtcSinceRun,
		Hours: make([]BalanceHour, 0, len(s.Hours)), StaleAlert: z.StaleAlert, LastSkip: z.Skip}
	for _, h := range s.Hours {
		bh := BalanceHour{Start: h.Start, Revision: h.Revision, Valid: h.Valid, Fallback: h.Fallback,
			ETMM: h.ET, Kc: h.Kc, Ks: h.Ks, ETcMM: h.ETc, ETcPotMM: h.ETcPot, RainMM: h.Rain,
			EffRainMM: h.EffRain, DrainageMM: h.Drainage}
		if h.HasWind {
			w := h.Wind2
			bh.Wind2MS = &w
		}
		if h.HasTemp {
			t := h.AirTemp
			bh.AirTempC = &t
		}
		b.Hours = append(b.Hours, bh)
	}
	return b
}

// migrate1to2 rewrites the zone balances and the command ledger from the
// JSON of the domain types (version 1) into their persistence structs
// (ZoneBalance, LedgerEntry). Every other bucket is unchanged.
func migrate1to2(tx *bbolt.Tx) error {
	top := tx.Bucket(BucketZones)
	if top == nil {
		return nil
	}
	if err := rewrite(top.Bucket(BucketLedger), func(raw []byte) (any, error) {
		var c commandV1
		err := json.Unmarshal(raw, &c)
		return c.v2(), err
	}); err != nil {
		return fmt.Errorf("zones/ledger: %w", err)
	}
	if err := rewrite(top.Bucket(BucketZoneState), func(raw []byte) (any, error) {
		var z zoneV1
		err := json.Unmarshal(raw, &z)
		return z.v2(), err
	}); err != nil {
		return fmt.Errorf("zones/state: %w", err)
	}
	return nil
}

// rewrite replaces every value of b (nil: nothing) by conv's result as JSON.
func rewrite(b *bbolt.Bucket, conv func([]byte) (any, error)) error {
	if b == nil {
		return nil
	}
	type kv struct{ k, v []byte }
	var out []kv
	if err := b.ForEach(func(k, v []byte) error {
		if v == nil {
			return nil // a nested bucket
		}
		x, err := conv(v)
		if err != nil {
			return fmt.Errorf("%s: %w", k, err)
		}
		nv, err := json.Marshal(x)
		if err != nil {
			return fmt.Errorf("%s: %w", k, err)
		}
		out = append(out, kv{append([]byte(nil), k...), nv})
		return nil
	}); err != nil {
		return err
	}
	for _, p := range out {
		if err := b.Put(p.k, p.v); err != nil {
			return err
		}
	}
	return nil
}

// Names inside a station's pipeline bucket as version 3 lays them out,
// frozen here for migrate2to3.
var (
	v3Hours         = []byte("hours")
	v3Meta          = []byte("meta")
	v3Held          = []byte("held")
	v3Cursor        = []byte("cursor")
	v3Watermark     = []byte("watermark")
	v3ClosedThrough = []byte("closed_through")
)

// migrate2to3 gives every station bucket of the pipeline an empty "held"
// bucket (readings ahead of the gateway clock, kept until it reaches them)
// and the "closed_through" mark in its meta bucket: the end of the latest
// hour the station closed, which pruning never removes. A version-2 station
// has closed an hour when its hours bucket holds one, when a record of it is
// pending, or when its cursor is past its watermark's hour (the wall clock
// closed hours without readings); then the mark is its cursor (hours close
// in sequence, so the cursor is the end of the latest). A station whose
// hours were all pruned and nothing of it is pending stays unmarked: it
// behaves as in version 2. The stored points of the history and the outbox
// get the version-3 names (migratePointsV3).
func migrate2to3(tx *bbolt.Tx) error {
	if err := migratePointsV3(tx); err != nil {
		return err
	}
	root := tx.Bucket(BucketPipeline)
	if root == nil {
		return nil
	}
	pending := tx.Bucket(BucketPending)
	var stations [][]byte
	if err := root.ForEach(func(k, v []byte) error {
		if v == nil {
			stations = append(stations, append([]byte(nil), k...))
		}
		return nil
	}); err != nil {
		return err
	}
	for _, key := range stations {
		sb := root.Bucket(key)
		if _, err := sb.CreateBucketIfNotExists(v3Held); err != nil {
			return fmt.Errorf("pipeline/%s: %w", key, err)
		}
		meta, hours := sb.Bucket(v3Meta), sb.Bucket(v3Hours)
		if meta == nil || hours == nil {
			return fmt.Errorf("pipeline/%s: no meta or hours bucket", key)
		}
		cursor := meta.Get(v3Cursor)
		if len(cursor) != 8 {
			continue // no reading yet
		}
		closed := false
		if k, _ := hours.Cursor().First(); k != nil {
			closed = true
		}
		if pending != nil {
			prefix := append(append([]byte(nil), key...), '/')
			if k, _ := pending.Cursor().Seek(prefix); k != nil && bytes.HasPrefix(k, prefix) {
				closed = true
			}
		}
		if wm := meta.Get(v3Watermark); len(wm) == 8 {
			c := time.Unix(0, int64(binary.BigEndian.Uint64(cursor)))
			w := time.Unix(0, int64(binary.BigEndian.Uint64(wm)))
			if c.After(w) {
				closed = true
			}
		}
		if closed {
			if err := meta.Put(v3ClosedThrough, append([]byte(nil), cursor...)); err != nil {
				return fmt.Errorf("pipeline/%s: %w", key, err)
			}
		}
	}
	return nil
}
