package pipeline

import (
	"encoding/json"
	"math"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/hourly"
)

// Updating a sensor's seen row (read it, keep the later reading, write it)
// happens for every sensor a checkpoint touches, so at every station of a
// large network: a budget of allocations for the read and the write,
// counted, not timed.
func TestSeenRowAllocations(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	v := 21.5
	ss := seenState{Arrival: h10.Add(time.Minute), Reading: h10, Stamped: true, Quantity: hourly.AirTemp, Value: &v}
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
		b, err := tx.CreateBucketIfNotExists([]byte("seen"))
		if err != nil {
			return err
		}
		key := []byte("t")
		allocs := testing.AllocsPerRun(100, func() {
			var old seenState
			_, err := getSeen(b, key, &old)
			require.NoError(t, err)
			require.NoError(t, putSeen(b, key, ss))
		})
		// bbolt's two cursors, the row written, the value read and the
		// number's text
		assert.LessOrEqual(t, allocs, 6.0)
		return nil
	}))
}

// seenCases are seen rows of every shape: fields present and absent, values
// in both of encoding/json's float formats, zones, times it refuses.
func seenCases() []seenState {
	f := func(v float64) *float64 { return &v }
	east := time.FixedZone("east", 9*3600+30*60)
	odd := time.FixedZone("odd", 25*3600)
	return []seenState{
		{},
		{Arrival: h10, Reading: h10.Add(-time.Second)},
		{Arrival: h10.Add(123456789 * time.Nanosecond), Reading: h10.In(east), Stamped: true},
		{Arrival: h10, Reading: h10, Quantity: hourly.RelHumidity, Value: f(61.5)},
		{Arrival: h10, Reading: h10, Quantity: hourly.Solar, Value: f(0)},
		{Arrival: h10, Reading: h10, Value: f(math.Copysign(0, -1))},
		{Arrival: h10, Reading: h10, Value: f(1e-7)},
		{Arrival: h10, Reading: h10, Value: f(-2.5e-12)},
		{Arrival: h10, Reading: h10, Value: f(1e21)},
		{Arrival: h10, Reading: h10, Value: f(123456789012345678)},
		{Arrival: h10, Reading: h10, Value: f(math.MaxFloat64)},
		{Arrival: h10, Reading: h10, Value: f(5e-324)},
		{Arrival: h10, Reading: h10, Value: f(math.Inf(1))},
		{Arrival: h10, Reading: h10, Value: f(math.NaN())},
		{Arrival: h10, Reading: h10, Quantity: "a<b"},
		{Arrival: h10, Reading: h10.In(odd)},
		{Arrival: time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC), Reading: h10},
		{Arrival: time.Date(-1, 1, 1, 0, 0, 0, 0, time.UTC), Reading: h10},
	}
}

// appendSeenState writes what json.Marshal writes, or leaves the row to
// it; parseSeenState reads every row json.Marshal writes as
// encoding/json does.
func TestSeenStateCodec(t *testing.T) {
	for i, ss := range seenCases() {
		want, werr := json.Marshal(ss)
		got, ok := appendSeenState(nil, ss)
		if ok {
			require.NoError(t, werr, "case %d", i)
			assert.Equal(t, string(want), string(got), "case %d", i)
		}
		if werr != nil {
			assert.False(t, ok, "case %d: encoding/json refuses it", i)
			continue
		}
		var byJSON, byScan seenState
		require.NoError(t, json.Unmarshal(want, &byJSON))
		if parseSeenState(want, &byScan) {
			assert.Equal(t, byJSON, byScan, "case %d: %s", i, want)
		}
	}
	for _, ss := range seenCases()[:12] {
		_, ok := appendSeenState(nil, ss)
		assert.True(t, ok, "%+v", ss)
	}
}

// FuzzParseSeenState checks that every row parseSeenState reads is read
// the same by encoding/json, into a row that already has values too.
func FuzzParseSeenState(f *testing.F) {
	for _, ss := range seenCases() {
		if raw, err := json.Marshal(ss); err == nil {
			f.Add(raw)
		}
	}
	f.Fuzz(func(t *testing.T, raw []byte) {
		v := 3.0
		prior := seenState{Stamped: true, Quantity: hourly.Wind, Value: &v}
		byScan := prior
		if !parseSeenState(raw, &byScan) {
			return
		}
		byJSON := prior
		if err := json.Unmarshal(raw, &byJSON); err != nil {
			t.Fatalf("parseSeenState read %q, encoding/json: %v", raw, err)
		}
		if !byScan.Arrival.Equal(byJSON.Arrival) || !byScan.Reading.Equal(byJSON.Reading) ||
			byScan.Arrival.String() != byJSON.Arrival.String() || byScan.Reading.String() != byJSON.Reading.String() ||
			byScan.Stamped != byJSON.Stamped || byScan.Quantity != byJSON.Quantity ||
			(byScan.Value == nil) != (byJSON.Value == nil) || (byScan.Value != nil && math.Float64bits(*byScan.Value) != math.Float64bits(*byJSON.Value)) {
			t.Fatalf("%q: parseSeenState %+v, encoding/json %+v", raw, byScan, byJSON)
		}
	})
}
