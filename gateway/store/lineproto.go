package store

import (
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"
)

// ErrInvalidPoint is wrapped by every validation error: the point can never
// be written as it is and goes to the quarantine instead of the store.
var ErrInvalidPoint = errors.New("invalid point")

// Limits of a valid point. The string limit keeps every line well below the
// line-size limits of common servers (common practice, no source).
const (
	maxNameLen   = 256
	maxStringLen = 16 << 10
	maxTags      = 32
	maxFields    = 200
)

// minTime is the earliest timestamp accepted: servers that take the InfluxDB
// write API reject or silently drop points before the Unix epoch.
var minTime = time.Unix(0, 0)

// Validate reports whether p can be written as one line of InfluxDB line
// protocol. The error wraps ErrInvalidPoint and names the offending part and
// value. Time limits that depend on the clock (future, retention) are checked
// by the writer, see CheckTime. Integer and float32 field values count as
// int64 and float64.
func Validate(p Point) error {
	p = normalize(p)
	if err := checkName("measurement", p.Measurement); err != nil {
		return err
	}
	if len(p.Tags) > maxTags {
		return fmt.Errorf("%w: %d tags, at most %d", ErrInvalidPoint, len(p.Tags), maxTags)
	}
	for k, v := range p.Tags {
		if err := checkName("tag key", k); err != nil {
			return err
		}
		if v == "" {
			return fmt.Errorf("%w: tag %q: empty value", ErrInvalidPoint, k)
		}
		if err := checkText("tag "+strconv.Quote(k)+" value", v, maxNameLen); err != nil {
			return err
		}
		if strings.HasSuffix(v, `\`) {
			return fmt.Errorf("%w: tag %q value %q ends in a backslash", ErrInvalidPoint, k, v)
		}
	}
	if len(p.Fields) == 0 {
		return fmt.Errorf("%w: no fields", ErrInvalidPoint)
	}
	if len(p.Fields) > maxFields {
		return fmt.Errorf("%w: %d fields, at most %d", ErrInvalidPoint, len(p.Fields), maxFields)
	}
	for k, v := range p.Fields {
		if err := checkName("field key", k); err != nil {
			return err
		}
		if _, ok := p.Tags[k]; ok {
			return fmt.Errorf("%w: %q is both a tag and a field", ErrInvalidPoint, k)
		}
		switch x := v.(type) {
		case float64:
			if math.IsNaN(x) || math.IsInf(x, 0) {
				return fmt.Errorf("%w: field %q: %v is not a finite number", ErrInvalidPoint, k, x)
			}
		case int64, bool:
		case string:
			if err := checkText("field "+strconv.Quote(k), x, maxStringLen); err != nil {
				return err
			}
		default:
			return fmt.Errorf("%w: field %q: unsupported type %T", ErrInvalidPoint, k, v)
		}
	}
	for k, v := range p.Notes {
		if err := checkName("note key", k); err != nil {
			return err
		}
		if err := checkText("note "+strconv.Quote(k), v, maxStringLen); err != nil {
			return err
		}
	}
	if p.Time.Before(minTime) {
		return fmt.Errorf("%w: time %s is before 1970-01-01", ErrInvalidPoint, p.Time.UTC().Format(time.RFC3339))
	}
	if p.Time.Year() > 2200 {
		return fmt.Errorf("%w: time %s is after 2200", ErrInvalidPoint, p.Time.UTC().Format(time.RFC3339))
	}
	return nil
}

// CheckTime reports whether t is acceptable to a store at now: at most
// maxFuture ahead and, when maxAge > 0, at most maxAge old. Victoria-metrics
// answers 204 yet drops points beyond both limits, so the writer checks first.
func CheckTime(t, now time.Time, maxFuture, maxAge time.Duration) error {
	if maxFuture > 0 && t.After(now.Add(maxFuture)) {
		return fmt.Errorf("%w: time %s is more than %s ahead of now %s", ErrInvalidPoint,
			t.UTC().Format(time.RFC3339), maxFuture, now.UTC().Format(time.RFC3339))
	}
	if maxAge > 0 && t.Before(now.Add(-maxAge)) {
		return fmt.Errorf("%w: time %s is older than the store retention %s", ErrInvalidPoint,
			t.UTC().Format(time.RFC3339), maxAge)
	}
	return nil
}

// checkName checks a measurement, tag key or field key.
func checkName(what, s string) error {
	if s == "" {
		return fmt.Errorf("%w: empty %s", ErrInvalidPoint, what)
	}
	if s[0] == '_' || s == "time" {
		return fmt.Errorf("%w: %s %q is reserved", ErrInvalidPoint, what, s)
	}
	if strings.HasSuffix(s, `\`) {
		return fmt.Errorf("%w: %s %q ends in a backslash", ErrInvalidPoint, what, s)
	}
	return checkText(what+" "+strconv.Quote(s), s, maxNameLen)
}

// checkText rejects invalid UTF-8, control characters (a newline cannot be
// escaped in line protocol) and over-long text.
func checkText(what, s string, max int) error {
	if len(s) > max {
		return fmt.Errorf("%w: %s: %d bytes, at most %d", ErrInvalidPoint, what, len(s), max)
	}
	if !utf8.ValidString(s) {
		return fmt.Errorf("%w: %s: not valid UTF-8", ErrInvalidPoint, what)
	}
	for _, r := range s {
		if r < 0x20 || r == 0x7f {
			return fmt.Errorf("%w: %s: control character %U", ErrInvalidPoint, what, r)
		}
	}
	return nil
}

// normalize returns p with field values of other numeric types converted to
// the four types a point carries (float64, int64, bool, string). The caller's
// map is copied before any change. Unsupported types are left for Validate.
func normalize(p Point) Point {
	copied := false
	for k, v := range p.Fields {
		var n any
		switch x := v.(type) {
		case float64, int64, bool, string:
			continue
		case float32:
			n = float64(x)
		case int:
			n = int64(x)
		case int32:
			n = int64(x)
		case int16:
			n = int64(x)
		case int8:
			n = int64(x)
		case uint32:
			n = int64(x)
		case uint16:
			n = int64(x)
		case uint8:
			n = int64(x)
		case uint:
			if uint64(x) > math.MaxInt64 {
				continue
			}
			n = int64(x)
		case uint64:
			if x > math.MaxInt64 {
				continue
			}
			n = int64(x)
		default:
			continue
		}
		if !copied {
			p.Fields = maps.Clone(p.Fields)
			copied = true
		}
		p.Fields[k] = n
	}
	return p
}

// AppendLine appends p as one line of InfluxDB line protocol (no trailing
// newline) with a nanosecond timestamp. Tags and fields are sorted by key, so
// the same point always gives the same bytes. Notes are not written. p must
// have passed Validate.
func AppendLine(dst []byte, p Point) []byte {
	p = normalize(p)
	dst = appendSeries(dst, p.Measurement, p.Tags)
	dst = append(dst, ' ')
	keys := sortedKeys(p.Fields)
	for i, k := range keys {
		if i > 0 {
			dst = append(dst, ',')
		}
		dst = appendEscaped(dst, k, keyEscapes)
		dst = append(dst, '=')
		dst = appendValue(dst, p.Fields[k])
	}
	dst = append(dst, ' ')
	return strconv.AppendInt(dst, p.Time.UnixNano(), 10)
}

// Line returns p as one line of line protocol; see AppendLine.
func Line(p Point) string { return string(AppendLine(nil, p)) }

// appendSeries appends the series key: the escaped measurement and the tags
// sorted by key, exactly as they start a line of line protocol.
func appendSeries(dst []byte, measurement string, tags map[string]string) []byte {
	dst = appendEscaped(dst, measurement, measurementEscapes)
	for _, k := range sortedKeys(tags) {
		dst = append(dst, ',')
		dst = appendEscaped(dst, k, keyEscapes)
		dst = append(dst, '=')
		dst = appendEscaped(dst, tags[k], keyEscapes)
	}
	return dst
}

func appendValue(dst []byte, v any) []byte {
	switch x := v.(type) {
	case float64:
		return appendFloat(dst, x)
	case int64:
		dst = strconv.AppendInt(dst, x, 10)
		return append(dst, 'i')
	case bool:
		return strconv.AppendBool(dst, x)
	case string:
		dst = append(dst, '"')
		dst = appendEscaped(dst, x, stringEscapes)
		return append(dst, '"')
	}
	return append(dst, '0') // unreachable for a validated point
}

// appendFloat writes plain decimals for ordinary magnitudes and exponent
// notation only for very small or large values; a value with no fractional
// part still reads as a float (no 'i' suffix).
func appendFloat(dst []byte, x float64) []byte {
	if a := math.Abs(x); a == 0 || (a >= 1e-6 && a < 1e15) {
		return strconv.AppendFloat(dst, x, 'f', -1, 64)
	}
	return strconv.AppendFloat(dst, x, 'e', -1, 64)
}

// Escapes of line protocol (InfluxDB line protocol reference, "Special
// characters", from memory): measurements escape comma and space; tag keys,
// tag values and field keys also escape the equals sign; string field values
// escape the double quote and the backslash.
const (
	measurementEscapes = ", "
	keyEscapes         = ",= "
	stringEscapes      = "\"\\"
)

func appendEscaped[S ~string | ~[]byte](dst []byte, s S, escapes string) []byte {
	for i := 0; i < len(s); i++ {
		c := s[i]
		for j := 0; j < len(escapes); j++ {
			if c == escapes[j] {
				dst = append(dst, '\\')
				break
			}
		}
		dst = append(dst, c)
	}
	return dst
}

func sortedKeys[V any](m map[string]V) []string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	return keys
}
