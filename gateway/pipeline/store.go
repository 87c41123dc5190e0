package pipeline

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"time"

	"go.etcd.io/bbolt"

	"etpulse/gateway/internal/plainjson"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// Layout of the pipeline's part of the state file:
//
//	pipeline/                     top bucket
//	  <site>/<station>/           one bucket per station
//	    samples/   hour(8) | time(8) | sensor  -> value(8) | quantity
//	    hours/     hour(8)                     -> JSON hourState (closed hours)
//	    meta/      "cursor", "watermark", "carry", "closed_through"
//	    counters/  sensor                      -> JSON counterState
//	    seen/      sensor                      -> JSON seenState
//	    held/      time(8) | sensor            -> JSON heldReading (ahead of the gateway clock)
//	pipeline.pending/  <site>/<station>/hour(8)/revision(8) -> record JSON
//
// hour and time are big-endian unsigned Unix seconds and nanoseconds, so a
// cursor walks hours and samples in time order. Times before 1970 are
// refused on ingest.
var (
	bucketRoot     = state.BucketPipeline
	bucketPending  = state.BucketPending
	bucketSamples  = []byte("samples")
	bucketHours    = []byte("hours")
	bucketMeta     = []byte("meta")
	bucketCounters = []byte("counters")
	bucketSeen     = []byte("seen")
	bucketHeld     = []byte("held")

	keyCursor    = []byte("cursor")
	keyWatermark = []byte("watermark")
	keyCarry     = []byte("carry")
	// keyClosedThrough is the end of the latest hour the station closed.
	// Pruning never removes it: readings before it are late or too old,
	// never the start of a new hour.
	keyClosedThrough = []byte("closed_through")
)

// hourState is what the pipeline keeps for a closed hour.
type hourState struct {
	Revision int         `json:"revision"`
	CarryIn  state.Carry `json:"carry_in"` // night carry the hour was computed with
	Dirty    bool        `json:"dirty"`    // a late reading arrived; recompute on a tick once it has been quiet for the close grace
	// LateAt is the pipeline clock when the latest late reading of the hour
	// was accepted (zero: none since the last emission).
	LateAt time.Time     `json:"late_at,omitzero"`
	TMin   *float64      `json:"t_min,omitempty"`
	TMax   *float64      `json:"t_max,omitempty"`
	Record *state.Record `json:"record,omitempty"`
}

// counterState is the previous value of a cumulative rain counter.
type counterState struct {
	Time  time.Time `json:"time"`
	Value float64   `json:"value"`
}

// seenState is when a sensor was last heard.
type seenState struct {
	Arrival time.Time `json:"arrival"` // pipeline clock when the reading was accepted
	Reading time.Time `json:"reading"` // the reading's own timestamp (latest seen)
	// Stamped: the sensor's latest reading carried its own time (not the
	// arrival time).
	Stamped bool `json:"stamped,omitempty"`
	// Quantity and Value are those of the latest reading by its own time
	// (schema version 3, optional): the reading checks resume from it after
	// a restart, so a jump across the restart is still a spike.
	Quantity hourly.Quantity `json:"quantity,omitempty"`
	Value    *float64        `json:"value,omitempty"`
}

// heldReading is a reading further ahead of the gateway clock than the
// station's max_future, kept until the clock reaches it. Its key holds its
// time and sensor.
type heldReading struct {
	Quantity hourly.Quantity `json:"quantity"`
	Value    float64         `json:"value"`
	Counter  bool            `json:"counter,omitempty"`
	Rollover float64         `json:"rollover,omitempty"`
	// Arrival is the pipeline clock when the reading arrived: admitting
	// it later does not make its station look less quiet than it was.
	Arrival time.Time `json:"arrival"`
}

func u64(v uint64) []byte {
	var b [8]byte
	binary.BigEndian.PutUint64(b[:], v)
	return b[:]
}

func hourKey(start time.Time) []byte { return u64(uint64(start.Unix())) }

func hourFromKey(k []byte) time.Time {
	return time.Unix(int64(binary.BigEndian.Uint64(k[:8])), 0).UTC()
}

func sampleKey(hour time.Time, s hourly.Sample) []byte {
	k := make([]byte, 0, 16+len(s.Sensor))
	k = append(k, hourKey(hour)...)
	k = append(k, u64(uint64(s.Time.UnixNano()))...)
	return append(k, s.Sensor...)
}

func sampleValue(s hourly.Sample) []byte {
	v := make([]byte, 0, 8+len(s.Quantity))
	v = append(v, u64(math.Float64bits(s.Value))...)
	return append(v, s.Quantity...)
}

func decodeSample(k, v []byte) (hourly.Sample, error) {
	if len(k) < 16 || len(v) < 8 {
		return hourly.Sample{}, fmt.Errorf("decode sample: short key or value (%d, %d bytes)", len(k), len(v))
	}
	return hourly.Sample{
		Sensor:   string(k[16:]),
		Quantity: hourly.Quantity(v[8:]),
		Time:     time.Unix(0, int64(binary.BigEndian.Uint64(k[8:16]))).UTC(),
		Value:    math.Float64frombits(binary.BigEndian.Uint64(v[:8])),
	}, nil
}

// stationBuckets are one station's buckets inside a transaction.
type stationBuckets struct {
	samples, hours, meta, counters, seen, held *bbolt.Bucket
}

// buckets returns the station's buckets, creating them in a writable tx.
func (st *station) buckets(tx *bbolt.Tx) (stationBuckets, error) {
	var sb stationBuckets
	root := tx.Bucket(bucketRoot)
	if root == nil {
		if !tx.Writable() {
			return sb, errNoState
		}
		var err error
		if root, err = tx.CreateBucketIfNotExists(bucketRoot); err != nil {
			return sb, fmt.Errorf("create bucket: %w", err)
		}
	}
	b := root.Bucket(st.key)
	if b == nil {
		if !tx.Writable() {
			return sb, errNoState
		}
		var err error
		if b, err = root.CreateBucket(st.key); err != nil {
			return sb, fmt.Errorf("create station bucket: %w", err)
		}
		for _, name := range [][]byte{bucketSamples, bucketHours, bucketMeta, bucketCounters, bucketSeen, bucketHeld} {
			if _, err := b.CreateBucket(name); err != nil {
				return sb, fmt.Errorf("create station bucket: %w", err)
			}
		}
	}
	sb.samples = b.Bucket(bucketSamples)
	sb.hours = b.Bucket(bucketHours)
	sb.meta = b.Bucket(bucketMeta)
	sb.counters = b.Bucket(bucketCounters)
	sb.seen = b.Bucket(bucketSeen)
	sb.held = b.Bucket(bucketHeld)
	if sb.samples == nil || sb.hours == nil || sb.meta == nil || sb.counters == nil || sb.seen == nil || sb.held == nil {
		return sb, fmt.Errorf("station %s: state file is missing a bucket", st.key)
	}
	return sb, nil
}

func getTime(b *bbolt.Bucket, key []byte) (time.Time, bool) {
	v := b.Get(key)
	if len(v) != 8 {
		return time.Time{}, false
	}
	return time.Unix(0, int64(binary.BigEndian.Uint64(v))).UTC(), true
}

func putTime(b *bbolt.Bucket, key []byte, t time.Time) error {
	return b.Put(key, u64(uint64(t.UnixNano())))
}

func getJSON(b *bbolt.Bucket, key []byte, v any) (bool, error) {
	raw := b.Get(key)
	if raw == nil {
		return false, nil
	}
	if err := json.Unmarshal(raw, v); err != nil {
		return false, fmt.Errorf("decode %s: %w", key, err)
	}
	return true, nil
}

func putJSON(b *bbolt.Bucket, key []byte, v any) error {
	raw, err := json.Marshal(v)
	if err != nil {
		return fmt.Errorf("encode %s: %w", key, err)
	}
	return b.Put(key, raw)
}

func pendingKey(st *station, hour time.Time, revision int) []byte {
	k := make([]byte, 0, len(st.key)+17)
	k = append(k, st.key...)
	k = append(k, '/')
	k = append(k, hourKey(hour)...)
	return append(k, u64(uint64(revision))...)
}

// getSeen reads a sensor's seen row into ss as getJSON does (left as it is
// when absent).
// Rows as appendSeenState writes them are read without encoding/json; any
// other row (an older writer's, a damaged one) goes through getJSON, with
// its result and errors.
func getSeen(b *bbolt.Bucket, key []byte, ss *seenState) (bool, error) {
	raw := b.Get(key)
	if raw == nil {
		return false, nil
	}
	fast := *ss // as encoding/json, fields the row lacks keep their value
	if parseSeenState(raw, &fast) {
		*ss = fast
		return true, nil
	}
	return getJSON(b, key, ss)
}

// putSeen writes a sensor's seen row: the bytes json.Marshal would write,
// without its reflection for the usual row.
func putSeen(b *bbolt.Bucket, key []byte, ss seenState) error {
	raw, ok := appendSeenState(make([]byte, 0, 128), ss)
	if !ok {
		return putJSON(b, key, ss)
	}
	return b.Put(key, raw)
}

// appendSeenState appends ss as json.Marshal encodes it (fields in order,
// empty ones omitted, times as Time.MarshalJSON writes them, the value as
// encoding/json formats a float64). ok is false when a field needs
// encoding/json itself: a time it refuses (year outside 0-9999, a zone
// hour outside 0-23), a quantity it would escape, a value that is not
// finite.
func appendSeenState(b []byte, ss seenState) ([]byte, bool) {
	var ok bool
	b = append(b, `{"arrival":`...)
	if b, ok = appendJSONTime(b, ss.Arrival); !ok {
		return nil, false
	}
	b = append(b, `,"reading":`...)
	if b, ok = appendJSONTime(b, ss.Reading); !ok {
		return nil, false
	}
	if ss.Stamped {
		b = append(b, `,"stamped":true`...)
	}
	if ss.Quantity != "" {
		for i := 0; i < len(ss.Quantity); i++ {
			if c := ss.Quantity[i]; c < 0x20 || c >= 0x7f || c == '"' || c == '\\' || c == '<' || c == '>' || c == '&' {
				return nil, false
			}
		}
		b = append(b, `,"quantity":"`...)
		b = append(b, ss.Quantity...)
		b = append(b, '"')
	}
	if ss.Value != nil {
		v := *ss.Value
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, false
		}
		// encoding/json's float64 format: 'e' below 1e-6 and from 1e21,
		// with a one-digit negative exponent written without its zero.
		format := byte('f')
		if a := math.Abs(v); a != 0 && (a < 1e-6 || a >= 1e21) {
			format = 'e'
		}
		b = append(b, `,"value":`...)
		b = strconv.AppendFloat(b, v, format, -1, 64)
		if n := len(b); format == 'e' && n >= 4 && b[n-4] == 'e' && b[n-3] == '-' && b[n-2] == '0' {
			b[n-2] = b[n-1]
			b = b[:n-1]
		}
	}
	return append(b, '}'), true
}

// appendJSONTime appends t quoted as Time.MarshalJSON writes it; false
// where Time.MarshalJSON fails.
func appendJSONTime(b []byte, t time.Time) ([]byte, bool) {
	b = append(b, '"')
	n0 := len(b)
	b = t.AppendFormat(b, time.RFC3339Nano)
	if len(b) < n0+len("9999-") || b[n0+4] != '-' {
		return nil, false // year not exactly four digits
	}
	if b[len(b)-1] != 'Z' {
		if c := b[len(b)-len("Z07:00")]; c >= '0' && c <= '9' {
			return nil, false
		}
		if h := 10*int(b[len(b)-5]-'0') + int(b[len(b)-4]-'0'); h >= 24 {
			return nil, false
		}
	}
	return append(b, '"'), true
}

// parseSeenState reads a seen row in appendSeenState's form (no white
// space, fields in its order, strings without escapes) into ss, as
// encoding/json would; false for anything else.
func parseSeenState(raw []byte, ss *seenState) bool {
	rest, ok := bytes.CutPrefix(raw, []byte(`{"arrival":`))
	if !ok {
		return false
	}
	var tok []byte
	if tok, rest, ok = cutString(rest); !ok || ss.Arrival.UnmarshalJSON(tok) != nil {
		return false
	}
	if rest, ok = bytes.CutPrefix(rest, []byte(`,"reading":`)); !ok {
		return false
	}
	if tok, rest, ok = cutString(rest); !ok || ss.Reading.UnmarshalJSON(tok) != nil {
		return false
	}
	if r, ok := bytes.CutPrefix(rest, []byte(`,"stamped":true`)); ok {
		ss.Stamped, rest = true, r
	}
	if r, ok := bytes.CutPrefix(rest, []byte(`,"quantity":`)); ok {
		if tok, rest, ok = cutString(r); !ok || len(tok) == 2 {
			return false
		}
		ss.Quantity = quantityOf(tok[1 : len(tok)-1])
	}
	if r, ok := bytes.CutPrefix(rest, []byte(`,"value":`)); ok {
		if len(r) == 0 {
			return false
		}
		end, ok := plainjson.ScanNumber(r, 0)
		if !ok {
			return false
		}
		v, err := strconv.ParseFloat(string(r[:end]), 64)
		if err != nil {
			return false
		}
		ss.Value, rest = &v, r[end:]
	}
	return string(rest) == "}"
}

// cutString cuts a plain JSON string (see plainjson.ScanString) from the
// front of p: the string with its quotes, and the rest.
func cutString(p []byte) (tok, rest []byte, ok bool) {
	tok, end, ok := plainjson.ScanString(p, 0)
	if !ok {
		return nil, nil, false
	}
	return tok, p[end:], true
}

// quantityOf returns the quantity named b, the package's own string for a
// known one (no copy per row).
func quantityOf(b []byte) hourly.Quantity {
	for _, q := range hourly.Quantities {
		if string(b) == string(q) {
			return q
		}
	}
	return hourly.Quantity(b)
}
