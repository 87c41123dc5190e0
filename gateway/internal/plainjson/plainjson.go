// Package plainjson scans the plain JSON that sensors and the state file
// hold (RFC 8259): white space, strings of printable ASCII without escapes
// and numbers. Callers use it for fast paths and leave anything it does not
// accept to encoding/json.
package plainjson

// SkipSpace returns the index of the first byte at or after i that is not
// JSON white space.
func SkipSpace(p []byte, i int) int {
	for i < len(p) && (p[i] == ' ' || p[i] == '\t' || p[i] == '\n' || p[i] == '\r') {
		i++
	}
	return i
}

// ScanString reads a string of printable ASCII without escapes at i and
// returns it with its quotes and the index after it.
func ScanString(p []byte, i int) ([]byte, int, bool) {
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

// IsNumber reports whether p (not empty) is one JSON number.
func IsNumber(p []byte) bool {
	end, ok := ScanNumber(p, 0)
	return ok && end == len(p)
}

// ScanNumber reads a JSON number at i < len(p) (RFC 8259 section 6:
// -?(0|[1-9][0-9]*)(.[0-9]+)?([eE][+-]?[0-9]+)?) and returns the index after it.
func ScanNumber(p []byte, i int) (int, bool) {
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
