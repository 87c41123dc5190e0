package ingest

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	"etpulse/gateway/internal/plainjson"
	"etpulse/hourly"
)

// number decodes a bare decimal number such as "21.4" (surrounding white
// space allowed). The reading takes the arrival time.
func (d *decoding) number(payload []byte) {
	s := strings.TrimSpace(string(payload))
	v, err := parseDecimal(s)
	if err != nil {
		if hint := d.structuredHint(s); hint != "" {
			err = errors.New(hint)
		}
		d.rejectAll(ReasonUnparseable, fmt.Errorf("payload: %w", err))
		return
	}
	d.emit("", d.b.sensor.Channel, d.b.sensor.Unit, v, stamp{d.arrival, true})
}

// structuredHint explains a JSON object or array sent to a number sensor
// and names the format (and value key) that would read it; "" when s is
// neither.
func (d *decoding) structuredHint(s string) string {
	what, fix := "", ""
	switch {
	case strings.HasPrefix(s, "{"):
		var obj map[string]json.RawMessage
		if json.Unmarshal([]byte(s), &obj) != nil {
			return ""
		}
		var values []string
		for k, raw := range obj {
			var f float64
			if json.Unmarshal(raw, &f) == nil && !isTimeKey(k, d.b.sensor.TimeKey) {
				values = append(values, k)
			}
		}
		sort.Strings(values)
		what, fix = "a JSON object", "set format: json and value_key: KEY"
		if len(values) > 0 {
			fix = "set format: json and value_key: " + values[0]
		}
		if len(values) > 1 {
			fix += " (or format: fields for several values)"
		}
	case strings.HasPrefix(s, "["):
		if !json.Valid([]byte(s)) {
			return ""
		}
		what, fix = "a JSON array", "set format: senml if it is a SenML pack"
	default:
		return ""
	}
	return fmt.Sprintf("%s is %s, but sensor %q has format number (a bare number such as 21.4): %s",
		truncate(s, 64), what, d.b.sensor.ID, fix)
}

// isTimeKey reports whether an object key is likely the reading's time
// rather than a value: the configured time key or a usual name for it.
func isTimeKey(k, configured string) bool {
	if configured != "" && k == configured {
		return true
	}
	switch strings.ToLower(k) {
	case "time", "ts", "timestamp":
		return true
	}
	return false
}

// json decodes {"<value_key>": 21.4, "<time_key>": ...}; other keys are
// ignored (they carry nothing this sensor is configured for).
func (d *decoding) json(payload []byte) {
	obj, at, ok := d.timedObject(payload)
	if !ok {
		return
	}
	key := d.b.sensor.ValueKey
	raw, ok := obj.get(key)
	if !ok {
		d.rejectAll(ReasonUnparseable, fmt.Errorf("payload: value key %q is missing", key))
		return
	}
	v, present, err := jsonNumber(raw)
	switch {
	case err != nil:
		d.rejectAll(ReasonUnparseable, fmt.Errorf("payload: %s: %w", key, err))
	case !present:
		d.rejectAll(ReasonUnparseable, fmt.Errorf("payload: %s is null", key))
	default:
		d.emit("", d.b.sensor.Channel, d.b.sensor.Unit, v, at)
	}
}

// fields decodes one JSON object carrying several quantities. A mapped key
// with a null value is "no reading" and skipped; a key neither mapped nor
// ignored is rejected as unknown_field while the other keys pass.
func (d *decoding) fields(payload []byte) {
	obj, at, ok := d.timedObject(payload)
	if !ok {
		return
	}
	slices.SortFunc(obj, func(a, b member) int { return bytes.Compare(a.key, b.key) })
	for _, m := range obj {
		if string(m.key) == d.b.sensor.TimeKey || d.b.ignore[string(m.key)] {
			continue
		}
		kn, ok := d.b.names[string(m.key)] // every key of Fields
		if !ok {
			d.rejectAll(ReasonUnknownField, fmt.Errorf("field %q is not mapped in fields or listed in ignore", truncate(string(m.key), 100)))
			continue
		}
		k, ch := kn.key, d.b.sensor.Fields[kn.key]
		v, present, err := jsonNumber(m.raw)
		if err != nil {
			d.rejectKey(k, ReasonUnparseable, fmt.Errorf("%s: %w", k, err))
			continue
		}
		if present {
			d.emit(k, ch, ch.Unit, v, at)
		}
	}
}

// senmlRecord is one record of a SenML pack (RFC 8428 section 4, JSON labels
// from section 5). Pointers tell absent from zero.
type senmlRecord struct {
	BaseName    *string  `json:"bn"`
	BaseTime    *float64 `json:"bt"`
	BaseUnit    *string  `json:"bu"`
	BaseValue   *float64 `json:"bv"`
	BaseSum     *float64 `json:"bs"`
	BaseVersion *float64 `json:"bver"`
	Name        *string  `json:"n"`
	Unit        *string  `json:"u"`
	Value       *float64 `json:"v"`
	StringValue *string  `json:"vs"`
	BoolValue   *bool    `json:"vb"`
	DataValue   *string  `json:"vd"`
	Sum         *float64 `json:"s"`
	Time        *float64 `json:"t"`
	UpdateTime  *float64 `json:"ut"`
}

// senmlRelativeLimit: resolved times below 2^28 s are relative to the
// current time (RFC 8428 section 4.5.3).
const senmlRelativeLimit = 1 << 28

// senml decodes a SenML pack in its JSON representation (RFC 8428). Base
// fields apply to their record and all following ones until changed
// (RFC 8428 section 4.1); name = bn + n, time = bt + t (relative to arrival
// when below 2^28), value = bv + v, or bs + s for a record with only a sum;
// unit = u, else bu, else the unit configured for the record. Records whose
// resolved name is neither mapped nor ignored are rejected as unknown_field.
func (d *decoding) senml(payload []byte) {
	if recs, ok := scanSenML(payload); ok {
		var base senmlBase
		for i := range recs {
			d.senmlRecord(i, &recs[i], &base)
		}
		return
	}
	var pack []json.RawMessage
	if err := json.Unmarshal(payload, &pack); err != nil {
		d.rejectAll(ReasonUnparseable, fmt.Errorf("senml pack: %w", jsonErr(err)))
		return
	}
	var base senmlBase
	for i, raw := range pack {
		var r senmlRecord
		if err := json.Unmarshal(raw, &r); err != nil {
			d.rejectAll(ReasonUnparseable, fmt.Errorf("senml record %d: %w", i, jsonErr(err)))
			continue
		}
		if mu := mustUnderstand(raw); mu != "" {
			d.rejectAll(ReasonUnparseable, fmt.Errorf("senml record %d: unsupported must-understand label %q", i, truncate(mu, 100)))
			continue
		}
		d.senmlRecord(i, &r, &base)
	}
}

// senmlBase holds the base fields in force (RFC 8428 section 4.1).
type senmlBase struct {
	bn, bu     string
	bt, bv, bs float64
}

// senmlRecord resolves record i of a pack against the base fields in force
// (updating them) and emits or rejects its reading.
func (d *decoding) senmlRecord(i int, r *senmlRecord, b *senmlBase) {
	if r.BaseVersion != nil && *r.BaseVersion > 10 {
		d.rejectAll(ReasonUnparseable, fmt.Errorf("senml record %d: unsupported version %v", i, *r.BaseVersion))
		return
	}
	if r.BaseName != nil {
		b.bn = *r.BaseName
	}
	if r.BaseTime != nil {
		b.bt = *r.BaseTime
	}
	if r.BaseUnit != nil {
		b.bu = *r.BaseUnit
	}
	if r.BaseValue != nil {
		b.bv = *r.BaseValue
	}
	if r.BaseSum != nil {
		b.bs = *r.BaseSum
	}
	hasValue := r.Value != nil || r.Sum != nil || r.StringValue != nil || r.BoolValue != nil || r.DataValue != nil
	if r.Name == nil && !hasValue {
		return // a record of base fields only
	}
	name := b.bn
	if r.Name != nil {
		name += *r.Name
	}
	if name == "" {
		d.rejectAll(ReasonUnparseable, fmt.Errorf("senml record %d: empty name", i))
		return
	}
	if d.b.ignore[name] {
		return
	}
	ch, ok := d.b.sensor.Records[name]
	if !ok {
		d.rejectAll(ReasonUnknownField, fmt.Errorf("senml record %q is not mapped in records or listed in ignore", truncate(name, 100)))
		return
	}
	var v float64
	switch {
	case r.Value != nil:
		v = b.bv + *r.Value
	case r.Sum != nil:
		v = b.bs + *r.Sum
	default:
		d.rejectKey(name, ReasonUnparseable, fmt.Errorf("senml record %q: no numeric value (v or s)", name))
		return
	}
	at, err := d.senmlTime(b.bt, r.Time)
	if err != nil {
		d.rejectKey(name, ReasonUnparseable, fmt.Errorf("senml record %q: %w", name, err))
		return
	}
	unit := ch.Unit
	pu := b.bu
	if r.Unit != nil {
		pu = *r.Unit
	}
	if pu != "" && !(ch.Quantity == hourly.Rain && ch.MMPerTip > 0) {
		eu, ok := senmlUnit(ch.Quantity, pu)
		if !ok {
			d.rejectKey(name, ReasonUnitMismatch, fmt.Errorf("senml record %q: unit %q is not valid for %s (accepted: %v or their SenML names)",
				name, truncate(pu, 40), ch.Quantity, hourly.UnitsFor(ch.Quantity)))
			return
		}
		unit = eu
	}
	d.emit(name, ch, unit, v, at)
}

func (d *decoding) senmlTime(bt float64, t *float64) (stamp, error) {
	rt := bt
	if t != nil {
		rt += *t
	}
	if math.IsNaN(rt) || math.IsInf(rt, 0) {
		return stamp{}, fmt.Errorf("time %v is not finite", rt)
	}
	if rt < senmlRelativeLimit {
		if math.Abs(rt) > 10*365*24*3600 {
			return stamp{}, fmt.Errorf("relative time %v s is out of range", rt)
		}
		return stamp{d.arrival.Add(time.Duration(rt * float64(time.Second))), true}, nil
	}
	at, err := unixSeconds(rt)
	return stamp{at, false}, err
}

// senmlUnits maps SenML unit names (RFC 8428 section 12.1 registry, from
// memory) to the engine's unit names where they differ.
var senmlUnits = map[string]string{
	"Cel": "degC",
	"%RH": "%",
	"/":   "fraction",
}

// senmlUnit resolves a payload unit for q: a SenML name or an engine name.
func senmlUnit(q hourly.Quantity, u string) (string, bool) {
	if e, ok := senmlUnits[u]; ok {
		u = e
	}
	return u, slices.Contains(hourly.UnitsFor(q), u)
}

// mustUnderstand returns the first label ending in "_" in a record: such
// labels change the meaning of the record and must be understood
// (RFC 8428 section 4.4), so a record carrying one is rejected.
func mustUnderstand(raw json.RawMessage) string {
	if !bytes.Contains(raw, []byte(`_"`)) && !bytes.Contains(raw, []byte(`\u`)) {
		return "" // no label can end in '_', escaped or not (cheap pre-check)
	}
	var labels map[string]json.RawMessage
	if json.Unmarshal(raw, &labels) != nil {
		return ""
	}
	var keys []string
	for k := range labels {
		if strings.HasSuffix(k, "_") {
			keys = append(keys, k)
		}
	}
	if len(keys) == 0 {
		return ""
	}
	sort.Strings(keys)
	return keys[0]
}

// timedObject decodes a JSON object payload and its reading time; on
// failure it rejects the whole message and reports false.
func (d *decoding) timedObject(payload []byte) (object, stamp, bool) {
	obj, err := decodeObject(payload)
	if err == nil {
		var at stamp
		if at, err = d.objectTime(obj); err == nil {
			return obj, at, true
		}
	}
	d.rejectAll(ReasonUnparseable, err)
	return nil, stamp{}, false
}

// decodeObject decodes a JSON object into its raw members: a plain one by
// scanFlat, without copies, any other by encoding/json.
func decodeObject(payload []byte) (object, error) {
	if obj, ok := scanFlat(payload, make(object, 0, 8)); ok {
		return obj, nil
	}
	var m map[string]json.RawMessage
	if err := json.Unmarshal(payload, &m); err != nil {
		return nil, fmt.Errorf("payload: %w", jsonErr(err))
	}
	if m == nil {
		return nil, fmt.Errorf("payload: want a JSON object, got null")
	}
	obj := make(object, 0, len(m))
	for k, raw := range m {
		obj = append(obj, member{key: []byte(k), raw: raw})
	}
	return obj, nil
}

// jsonErr shortens encoding/json errors to the part a reader needs.
func jsonErr(err error) error {
	if te, ok := err.(*json.UnmarshalTypeError); ok {
		return fmt.Errorf("want %s, got JSON %s", te.Type, te.Value)
	}
	return err
}

// objectTime reads the optional timestamp of a json or fields payload.
func (d *decoding) objectTime(obj object) (stamp, error) {
	key := d.b.sensor.TimeKey
	raw, ok := obj.get(key)
	if !ok || isNull(raw) {
		return stamp{d.arrival, true}, nil
	}
	t, err := parseTime(raw)
	if err != nil {
		return stamp{}, fmt.Errorf("payload: %s: %w", key, err)
	}
	return stamp{t, false}, nil
}

func isNull(raw json.RawMessage) bool { return bytes.Equal(bytes.TrimSpace(raw), []byte("null")) }

// parseTime reads an RFC 3339 string, or a number of unix seconds, or of unix
// milliseconds when its magnitude is 1e11 or more (1e11 s lies in the year
// 5138, 1e11 ms in 1973).
func parseTime(raw json.RawMessage) (time.Time, error) {
	// A plain string or a number (scanFlat's values) needs no decoder.
	if str, end, ok := plainjson.ScanString(raw, 0); ok && end == len(raw) {
		return parseTimeString(string(str[1 : len(str)-1]))
	}
	if len(raw) > 0 && plainjson.IsNumber(raw) {
		n, err := strconv.ParseFloat(string(raw), 64)
		if err != nil {
			return time.Time{}, fmt.Errorf("want an RFC 3339 string or unix seconds/milliseconds, got %s", truncate(string(raw), 64))
		}
		return unixTime(n)
	}
	var s string
	if json.Unmarshal(raw, &s) == nil {
		return parseTimeString(s)
	}
	var n float64
	if err := json.Unmarshal(raw, &n); err != nil {
		return time.Time{}, fmt.Errorf("want an RFC 3339 string or unix seconds/milliseconds, got %s", truncate(string(raw), 64))
	}
	return unixTime(n)
}

// parseTimeString reads an RFC 3339 time.
func parseTimeString(s string) (time.Time, error) {
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return time.Time{}, fmt.Errorf("%q is not an RFC 3339 time", truncate(s, 64))
	}
	return t, nil
}

// unixTime reads unix seconds, or milliseconds when n is 1e11 or more.
func unixTime(n float64) (time.Time, error) {
	if math.Abs(n) >= 1e11 {
		n /= 1000
	}
	return unixSeconds(n)
}

// unixSeconds converts fractional unix seconds to a UTC time, bounded to
// years 1970-2200.
func unixSeconds(n float64) (time.Time, error) {
	const maxUnix = 7258118400 // 2200-01-01T00:00:00Z
	if math.IsNaN(n) || n < 0 || n >= maxUnix {
		return time.Time{}, fmt.Errorf("unix time %v outside 1970..2200", n)
	}
	sec, frac := math.Modf(n)
	return time.Unix(int64(sec), int64(math.Round(frac*1e9))).UTC(), nil
}

// jsonNumber reads a number, or a string holding a decimal number. present
// is false for JSON null.
func jsonNumber(raw json.RawMessage) (v float64, present bool, err error) {
	raw = bytes.TrimSpace(raw)
	if len(raw) == 0 || isNull(raw) {
		return 0, false, nil
	}
	switch raw[0] {
	case '"':
		var s string
		if err := json.Unmarshal(raw, &s); err != nil {
			return 0, false, err
		}
		v, err := parseDecimal(strings.TrimSpace(s))
		return v, err == nil, err
	case '{':
		return 0, false, fmt.Errorf("want a number, got an object")
	case '[':
		return 0, false, fmt.Errorf("want a number, got an array")
	case 't', 'f':
		return 0, false, fmt.Errorf("want a number, got %s", truncate(string(raw), 8))
	}
	// raw is a JSON token already validated by the decoder: a number here.
	v, err = parseDecimal(string(raw))
	if err != nil {
		return 0, false, fmt.Errorf("want a finite number, got %s", truncate(string(raw), 64))
	}
	return v, true, nil
}

// parseDecimal parses a finite decimal number; hexadecimal, NaN and Inf
// spellings are refused.
func parseDecimal(s string) (float64, error) {
	if s == "" {
		return 0, fmt.Errorf("empty, want a number")
	}
	for _, c := range s {
		if !(c >= '0' && c <= '9' || c == '.' || c == '-' || c == '+' || c == 'e' || c == 'E') {
			return 0, fmt.Errorf("%q is not a decimal number", truncate(s, 64))
		}
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsInf(v, 0) {
		return 0, fmt.Errorf("%q is not a decimal number", truncate(s, 64))
	}
	return v, nil
}
