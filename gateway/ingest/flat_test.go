package ingest

import (
	"encoding/json"
	"reflect"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// scanFlat takes the plain objects sensors send and leaves every other
// payload to encoding/json.
func TestScanFlat(t *testing.T) {
	for _, p := range []string{
		`{}`, ` { } `, `{"rh": 61.5, "ts": "2026-06-01T10:00:00Z"}`,
		`{"at":1780308000000,"temp":-0.5e-3,"x":null,"s":"12.5"}`, "{\t\"a\"\r\n:\n0}",
	} {
		obj, ok := scanFlat([]byte(p), nil)
		require.True(t, ok, p)
		var m map[string]json.RawMessage
		require.NoError(t, json.Unmarshal([]byte(p), &m))
		assert.Len(t, obj, len(m), p)
	}
	for _, p := range []string{
		``, `null`, `[]`, `{`, `{"a":1,}`, `{"a":1}x`, `{"a":1 "b":2}`, `{"a":01}`, `{"a":1.}`, `{"a":-}`, `{"a":1e}`,
		`{"a":true}`, `{"a":{"b":1}}`, `{"a":[1]}`, `{"a\"b":1}`, `{"a":"x\ny"}`, `{"é":1}`, `{"a":1,"a":2}`, `{"a":nul}`, "\ufeff{}",
	} {
		_, ok := scanFlat([]byte(p), nil)
		assert.False(t, ok, p)
	}
}

// FuzzScanFlat checks that every payload scanFlat accepts is valid JSON
// whose members (as encoding/json decodes them into a map) are exactly the
// ones scanFlat returns.
func FuzzScanFlat(f *testing.F) {
	for _, s := range []string{`{"rh": 61.5, "ts": "2026-06-01T10:00:00Z"}`, `{"a":null,"b":"1","c":-0.0e+1}`, `{"a":1,"a":2}`, `{"a":{}}`} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, p []byte) {
		obj, ok := scanFlat(p, nil)
		if !ok {
			return
		}
		var m map[string]json.RawMessage
		if err := json.Unmarshal(p, &m); err != nil {
			t.Fatalf("scanFlat accepted %q, encoding/json: %v", p, err)
		}
		if m == nil || len(m) != len(obj) {
			t.Fatalf("scanFlat gave %d members of %q, encoding/json %d", len(obj), p, len(m))
		}
		for _, mb := range obj {
			if raw, ok := m[string(mb.key)]; !ok || string(raw) != string(mb.raw) {
				t.Fatalf("member %q of %q: scanFlat %q, encoding/json %q", mb.key, p, mb.raw, raw)
			}
		}
	})
}

// parseTimeByDecoder is parseTime as it was before the plain-value fast
// path: every value through encoding/json.
func parseTimeByDecoder(raw json.RawMessage) (time.Time, error) {
	var s string
	if json.Unmarshal(raw, &s) == nil {
		return parseTimeString(s)
	}
	var n float64
	if err := json.Unmarshal(raw, &n); err != nil {
		return time.Time{}, err
	}
	return unixTime(n)
}

// FuzzParseTime checks that parseTime reads every time value as the decoder
// does: the same time, or an error for both.
func FuzzParseTime(f *testing.F) {
	for _, s := range []string{`"2026-06-01T10:00:00Z"`, `1780308000`, `1780308000000`, `1e400`, `"x\u0041"`, `-1`, `"2026-06-01T10:00:00.5+02:00"`} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, raw []byte) {
		if !json.Valid(raw) {
			return // parseTime gets values the decoder has read
		}
		got, err := parseTime(raw)
		want, werr := parseTimeByDecoder(raw)
		if (err == nil) != (werr == nil) || !got.Equal(want) {
			t.Fatalf("parseTime(%q) = %v, %v; by the decoder %v, %v", raw, got, err, want, werr)
		}
	})
}

// FuzzScanSenML checks that every pack scanSenML accepts decodes with
// encoding/json, record by record, into the same records, none with a
// must-understand label.
func FuzzScanSenML(f *testing.F) {
	for _, s := range []string{
		`[{"bn":"east:","bt":1780308000,"n":"temp","u":"Cel","v":18.5},{"n":"vp","u":"kPa","v":1.2},{"n":"rn","u":"W/m2","v":412}]`,
		`[{"n":"a","v":1,"exp_":2}]`, `[{"n":"a","vb":true}]`, `[{"N":"a","v":1}]`, `[{"n":null,"v":1e999}]`, `[]`, `[{}]`,
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, p []byte) {
		recs, ok := scanSenML(p)
		if !ok {
			return
		}
		var pack []json.RawMessage
		if err := json.Unmarshal(p, &pack); err != nil {
			t.Fatalf("scanSenML accepted %q, encoding/json: %v", p, err)
		}
		if len(pack) != len(recs) {
			t.Fatalf("scanSenML gave %d records of %q, encoding/json %d", len(recs), p, len(pack))
		}
		for i, raw := range pack {
			var r senmlRecord
			if err := json.Unmarshal(raw, &r); err != nil {
				t.Fatalf("record %d of %q: encoding/json: %v", i, p, err)
			}
			if mu := mustUnderstand(raw); mu != "" {
				t.Fatalf("record %d of %q: must-understand label %q accepted", i, p, mu)
			}
			if !reflect.DeepEqual(r, recs[i]) {
				t.Fatalf("record %d of %q: scanSenML %+v, encoding/json %+v", i, p, recs[i], r)
			}
		}
	})
}
