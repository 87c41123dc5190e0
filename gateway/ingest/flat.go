package ingest

import (
	"bytes"
	"encoding/json"
	"strconv"

	"etpulse/gateway/internal/plainjson"
)

// member is one member of a JSON object: its key and its raw value.
type member struct {
	key []byte
	raw json.RawMessage
}

// object is a decoded JSON object: its members (keys unique), in payload
// order or, for one read by encoding/json, in no particular order.
type object []member

// get returns the raw value of the member with key k.
func (o object) get(k string) (json.RawMessage, bool) {
	for _, m := range o {
		if string(m.key) == k {
			return m.raw, true
		}
	}
	return nil, false
}

// scanFlat reads p as a JSON object of the plain shape sensors send: keys
// and string values of printable ASCII without escapes, values that are
// numbers, null or such strings, no key twice (RFC 8259 sections 2-7). It
// appends the members to out. ok is false for anything else (nesting,
// true/false, escapes, other bytes, repeated keys, bad syntax): the caller
// then decodes with encoding/json, which gives the same members for every
// payload scanFlat accepts and its own error for a bad one. The raw values
// are slices of p.
func scanFlat(p []byte, out object) (object, bool) {
	out, end, ok := scanFlatAt(p, plainjson.SkipSpace(p, 0), out)
	return out, ok && plainjson.SkipSpace(p, end) == len(p)
}

// scanFlatAt reads a plain object (see scanFlat) starting at p[i] and
// returns its members and the index after it.
func scanFlatAt(p []byte, i int, out object) (object, int, bool) {
	if i == len(p) || p[i] != '{' {
		return nil, 0, false
	}
	i = plainjson.SkipSpace(p, i+1)
	if i < len(p) && p[i] == '}' {
		return out, i + 1, true
	}
	for {
		key, j, ok := plainjson.ScanString(p, i)
		if !ok {
			return nil, 0, false
		}
		key = key[1 : len(key)-1]
		i = plainjson.SkipSpace(p, j)
		if i == len(p) || p[i] != ':' {
			return nil, 0, false
		}
		i = plainjson.SkipSpace(p, i+1)
		raw, j, ok := scanPlainValue(p, i)
		if !ok {
			return nil, 0, false
		}
		for _, m := range out {
			if bytes.Equal(m.key, key) {
				return nil, 0, false // encoding/json keeps the last: leave it to it
			}
		}
		out = append(out, member{key: key, raw: raw})
		i = plainjson.SkipSpace(p, j)
		switch {
		case i == len(p):
			return nil, 0, false
		case p[i] == '}':
			return out, i + 1, true
		case p[i] != ',':
			return nil, 0, false
		}
		i = plainjson.SkipSpace(p, i+1)
	}
}

// scanPlainValue reads a number, null or plain string at i and returns its
// bytes and the index after it.
func scanPlainValue(p []byte, i int) ([]byte, int, bool) {
	if i == len(p) {
		return nil, 0, false
	}
	switch c := p[i]; {
	case c == '"':
		return plainjson.ScanString(p, i)
	case c == 'n':
		if bytes.HasPrefix(p[i:], []byte("null")) {
			return p[i : i+4], i + 4, true
		}
		return nil, 0, false
	case c == '-' || c >= '0' && c <= '9':
		if j, ok := plainjson.ScanNumber(p, i); ok {
			return p[i:j], j, true
		}
		return nil, 0, false
	}
	return nil, 0, false
}

// scanSenML reads p as a SenML pack (RFC 8428 section 5: a JSON array of
// records) when every record is a plain object (see scanFlat) whose labels
// are all among senmlRecord's, with a string or null for a string label and
// a number or null for a number label. ok is false for anything else (a
// boolean value, another label such as a must-understand one, a number out
// of range): the caller then decodes the pack with encoding/json, which
// gives the same records here and its own errors there.
func scanSenML(p []byte) ([]senmlRecord, bool) {
	i := plainjson.SkipSpace(p, 0)
	if i == len(p) || p[i] != '[' {
		return nil, false
	}
	var (
		recs    []senmlRecord
		members = make(object, 0, 8)
	)
	i = plainjson.SkipSpace(p, i+1)
	if i < len(p) && p[i] == ']' {
		return recs, plainjson.SkipSpace(p, i+1) == len(p)
	}
	for {
		var ok bool
		members, i, ok = scanFlatAt(p, i, members[:0])
		if !ok {
			return nil, false
		}
		var r senmlRecord
		st := new(senmlStore)
		for _, m := range members {
			if !r.set(m, st) {
				return nil, false
			}
		}
		recs = append(recs, r)
		i = plainjson.SkipSpace(p, i)
		switch {
		case i == len(p):
			return nil, false
		case p[i] == ']':
			return recs, plainjson.SkipSpace(p, i+1) == len(p)
		case p[i] != ',':
			return nil, false
		}
		i = plainjson.SkipSpace(p, i+1)
	}
}

// senmlStore holds the values a senmlRecord read by scanSenML points to:
// one allocation per record, not one per label.
type senmlStore struct {
	str [6]string
	num [8]float64
}

// set sets the label of m in r as encoding/json would (null leaves it
// unset), its value kept in st; false for a label or a value type that
// needs encoding/json.
func (r *senmlRecord) set(m member, st *senmlStore) bool {
	var str **string
	var num **float64
	var slot int
	switch string(m.key) {
	case "bn":
		str, slot = &r.BaseName, 0
	case "bu":
		str, slot = &r.BaseUnit, 1
	case "n":
		str, slot = &r.Name, 2
	case "u":
		str, slot = &r.Unit, 3
	case "vs":
		str, slot = &r.StringValue, 4
	case "vd":
		str, slot = &r.DataValue, 5
	case "bt":
		num, slot = &r.BaseTime, 0
	case "bv":
		num, slot = &r.BaseValue, 1
	case "bs":
		num, slot = &r.BaseSum, 2
	case "bver":
		num, slot = &r.BaseVersion, 3
	case "v":
		num, slot = &r.Value, 4
	case "s":
		num, slot = &r.Sum, 5
	case "t":
		num, slot = &r.Time, 6
	case "ut":
		num, slot = &r.UpdateTime, 7
	default:
		return false // vb, or a label encoding/json matches differently or ignores
	}
	switch raw := m.raw; {
	case string(raw) == "null":
		return true
	case str != nil && raw[0] == '"':
		st.str[slot] = string(raw[1 : len(raw)-1])
		*str = &st.str[slot]
		return true
	case num != nil && raw[0] != '"':
		v, err := strconv.ParseFloat(string(raw), 64)
		if err != nil {
			return false
		}
		st.num[slot] = v
		*num = &st.num[slot]
		return true
	}
	return false
}
