package ingest

import (
	"bytes"
	"encoding/json"
	"strconv"
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
	out, end, ok := scanFlatAt(p, skipSpace(p, 0), out)
	return out, ok && skipSpace(p, end) == len(p)
}

// scanFlatAt reads a plain object (see scanFlat) starting at p[i] and
// returns its members and the index after it.
func scanFlatAt(p []byte, i int, out object) (object, int, bool) {
	if i == len(p) || p[i] != '{' {
		return nil, 0, false
	}
	i = skipSpace(p, i+1)
	if i < len(p) && p[i] == '}' {
		return out, i + 1, true
	}
	for {
		key, j, ok := scanPlainString(p, i)
		if !ok {
			return nil, 0, false
		}
		key = key[1 : len(key)-1]
		i = skipSpace(p, j)
		if i == len(p) || p[i] != ':' {
			return nil, 0, false
		}
		i = skipSpace(p, i+1)
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
		i = skipSpace(p, j)
		switch {
		case i == len(p):
			return nil, 0, false
		case p[i] == '}':
			return out, i + 1, true
		case p[i] != ',':
			return nil, 0, false
		}
		i = skipSpace(p, i+1)
	}
}

// skipSpace returns the index of the first byte at or after i that is not
// JSON white space.
func skipSpace(p []byte, i int) int {
	for i < len(p) && (p[i] == ' ' || p[i] == '\t' || p[i] == '\n' || p[i] == '\r') {
		i++
	}
	return i
}

// scanPlainString reads a string of printable ASCII without escapes at i and
// returns it with its quotes and the index after it.
func scanPlainString(p []byte, i int) ([]byte, int, bool) {
	if i == len(p) || p[i] != '"' {
		return nil, 0, false
	}
	for j := i + 1; j < len(p); j++ {
		switch c := p[j]; {
		case c == '"':
			return p[i : j+1], j + 1, true
		case c < 0x20 || c >= 0x7f || c == '\\':
			return nil, 0, false
		}
	}
	return nil, 0, false
}

// scanPlainValue reads a number, null or plain string at i and returns its
// bytes and the index after it.
func scanPlainValue(p []byte, i int) ([]byte, int, bool) {
	if i == len(p) {
		return nil, 0, false
	}
	switch c := p[i]; {
	case c == '"':
		return scanPlainString(p, i)
	case c == 'n':
		if bytes.HasPrefix(p[i:], []byte("null")) {
			return p[i : i+4], i + 4, true
		}
		return nil, 0, false
	case c == '-' || c >= '0' && c <= '9':
		if j, ok := scanNumber(p, i); ok {
			return p[i:j], j, true
		}
		return nil, 0, false
	}
	return nil, 0, false
}

// isPlainNumber reports whether p (not empty) is one JSON number.
func isPlainNumber(p []byte) bool {
	end, ok := scanNumber(p, 0)
	return ok && end == len(p)
}

// scanNumber reads a JSON number at i < len(p) (RFC 8259 section 6:
// -?(0|[1-9][0-9]*)(.[0-9]+)?([eE][+-]?[0-9]+)?) and returns the index after it.
func scanNumber(p []byte, i int) (int, bool) {
	digits := func(j int) int {
		for j < len(p) && p[j] >= '0' && p[j] <= '9' {
			j++
		}
		return j
	}
	if p[i] == '-' {
		i++
	}
	switch {
	case i == len(p):
		return 0, false
	case p[i] == '0':
		i++
	case p[i] >= '1' && p[i] <= '9':
		i = digits(i)
	default:
		return 0, false
	}
	if i < len(p) && p[i] == '.' {
		j := digits(i + 1)
		if j == i+1 {
			return 0, false
		}
		i = j
	}
	if i < len(p) && (p[i] == 'e' || p[i] == 'E') {
		i++
		if i < len(p) && (p[i] == '+' || p[i] == '-') {
			i++
		}
		j := digits(i)
		if j == i {
			return 0, false
		}
		i = j
	}
	return i, true
}

// scanSenML reads p as a SenML pack (RFC 8428 section 5: a JSON array of
// records) when every record is a plain object (see scanFlat) whose labels
// are all among senmlRecord's, with a string or null for a string label and
// a number or null for a number label. ok is false for anything else (a
// boolean value, another label such as a must-understand one, a number out
// of range): the caller then decodes the pack with encoding/json, which
// gives the same records here and its own errors there.
func scanSenML(p []byte) ([]senmlRecord, bool) {
	i := skipSpace(p, 0)
	if i == len(p) || p[i] != '[' {
		return nil, false
	}
	var (
		recs    []senmlRecord
		members = make(object, 0, 8)
	)
	i = skipSpace(p, i+1)
	if i < len(p) && p[i] == ']' {
		return recs, skipSpace(p, i+1) == len(p)
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
		i = skipSpace(p, i)
		switch {
		case i == len(p):
			return nil, false
		case p[i] == ']':
			return recs, skipSpace(p, i+1) == len(p)
		case p[i] != ',':
			return nil, false
		}
		i = skipSpace(p, i+1)
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
