package ingest

import (
	"bytes"
	"encoding/json"
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
	i := skipSpace(p, 0)
	if i == len(p) || p[i] != '{' {
		return nil, false
	}
	i = skipSpace(p, i+1)
	if i < len(p) && p[i] == '}' {
		return out, skipSpace(p, i+1) == len(p)
	}
	for {
		key, j, ok := scanPlainString(p, i)
		if !ok {
			return nil, false
		}
		key = key[1 : len(key)-1]
		i = skipSpace(p, j)
		if i == len(p) || p[i] != ':' {
			return nil, false
		}
		i = skipSpace(p, i+1)
		raw, j, ok := scanPlainValue(p, i)
		if !ok {
			return nil, false
		}
		for _, m := range out {
			if bytes.Equal(m.key, key) {
				return nil, false // encoding/json keeps the last: leave it to it
			}
		}
		out = append(out, member{key: key, raw: raw})
		i = skipSpace(p, j)
		switch {
		case i == len(p):
			return nil, false
		case p[i] == '}':
			return out, skipSpace(p, i+1) == len(p)
		case p[i] != ',':
			return nil, false
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
