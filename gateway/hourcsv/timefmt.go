package hourcsv

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"time"
)

// LocalLayout is the layout of an hour start in station standard time, the
// form calc reads (without an offset) and writes.
const LocalLayout = "2006-01-02T15:04"

// StandardZone returns the fixed zone of a station's standard time for a UTC
// offset in hours (e.g. -8, 5.5). Daylight-saving time never applies: solar
// geometry works in standard time.
func StandardZone(utcOffset float64) (*time.Location, error) {
	if math.IsNaN(utcOffset) || utcOffset < -14 || utcOffset > 14 {
		return nil, fmt.Errorf("standard zone: utc offset must be within -14..14 hours, got %v", utcOffset)
	}
	secs := int(math.Round(utcOffset * 3600))
	if secs%900 != 0 {
		return nil, fmt.Errorf("standard zone: utc offset must be a multiple of 15 minutes, got %v h", utcOffset)
	}
	sign := byte('+')
	abs := secs
	if secs < 0 {
		sign = '-'
		abs = -secs
	}
	name := fmt.Sprintf("UTC%c%02d:%02d", sign, abs/3600, abs%3600/60)
	return time.FixedZone(name, secs), nil
}

var errTimeSyntax = errors.New("want 2006-01-02T15:04 in station standard time, or RFC 3339 with an offset such as 2006-01-02T15:04:00-08:00")

// parseTime parses an hour start. A value without an offset is taken as
// station standard time (zone); a value with one (RFC 3339: "Z" or "±hh:mm")
// is converted to it. The common fixed forms are parsed by hand, without
// allocating; anything else falls back to time.Parse with RFC 3339.
func parseTime(s string, zone *time.Location) (time.Time, error) {
	// 2006-01-02T15:04 | 2006-01-02T15:04:05, then optional Z | ±hh:mm.
	if len(s) < 16 || !digits(s, 0, 4) || s[4] != '-' || !digits(s, 5, 7) || s[7] != '-' ||
		!digits(s, 8, 10) || (s[10] != 'T' && s[10] != ' ') || !digits(s, 11, 13) || s[13] != ':' || !digits(s, 14, 16) {
		return time.Time{}, errTimeSyntax
	}
	year := num(s, 0, 4)
	month := num(s, 5, 7)
	day := num(s, 8, 10)
	hour := num(s, 11, 13)
	minute := num(s, 14, 16)
	sec := 0
	rest := s[16:]
	if len(rest) >= 3 && rest[0] == ':' && digits(rest, 1, 3) {
		sec = num(rest, 1, 3)
		rest = rest[3:]
		if len(rest) > 0 && rest[0] == '.' {
			// Fractional seconds: rare in hourly files; let the library do it.
			return parseRFC3339(s, zone)
		}
	}
	if month < 1 || month > 12 {
		return time.Time{}, fmt.Errorf("month %d out of range", month)
	}
	if day < 1 || day > daysIn(year, month) {
		return time.Time{}, fmt.Errorf("day %d out of range for %04d-%02d", day, year, month)
	}
	if hour > 23 || minute > 59 || sec > 59 {
		return time.Time{}, fmt.Errorf("time of day %02d:%02d:%02d out of range", hour, minute, sec)
	}
	loc := zone
	switch {
	case rest == "":
	case rest == "Z":
		loc = time.UTC
	case len(rest) == 6 && (rest[0] == '+' || rest[0] == '-') && digits(rest, 1, 3) && rest[3] == ':' && digits(rest, 4, 6):
		oh, om := num(rest, 1, 3), num(rest, 4, 6)
		if oh > 23 || om > 59 {
			return time.Time{}, fmt.Errorf("offset %s out of range", rest)
		}
		off := oh*3600 + om*60
		if rest[0] == '-' {
			off = -off
		}
		if _, zoneOff := time.Unix(0, 0).In(zone).Zone(); off == zoneOff {
			loc = zone
		} else {
			t := time.Date(year, time.Month(month), day, hour, minute, sec, 0, time.UTC)
			return t.Add(-time.Duration(off) * time.Second).In(zone), nil
		}
	default:
		return time.Time{}, errTimeSyntax
	}
	return time.Date(year, time.Month(month), day, hour, minute, sec, 0, loc).In(zone), nil
}

func parseRFC3339(s string, zone *time.Location) (time.Time, error) {
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return time.Time{}, errTimeSyntax
	}
	return t.In(zone), nil
}

func digits(s string, from, to int) bool {
	if len(s) < to {
		return false
	}
	for i := from; i < to; i++ {
		if s[i] < '0' || s[i] > '9' {
			return false
		}
	}
	return true
}

func num(s string, from, to int) int {
	n := 0
	for i := from; i < to; i++ {
		n = n*10 + int(s[i]-'0')
	}
	return n
}

func daysIn(year, month int) int {
	switch month {
	case 2:
		if year%4 == 0 && (year%100 != 0 || year%400 == 0) {
			return 29
		}
		return 28
	case 4, 6, 9, 11:
		return 30
	}
	return 31
}

// AppendLocal appends t in the form 2006-01-02T15:04, in t's own location,
// without allocating.
func AppendLocal(dst []byte, t time.Time) []byte {
	y, mo, d := t.Date()
	h, mi, _ := t.Clock()
	dst = appendInt(dst, y, 4)
	dst = append(dst, '-')
	dst = appendInt(dst, int(mo), 2)
	dst = append(dst, '-')
	dst = appendInt(dst, d, 2)
	dst = append(dst, 'T')
	dst = appendInt(dst, h, 2)
	dst = append(dst, ':')
	return appendInt(dst, mi, 2)
}

// AppendDate appends the date of t, 2006-01-02, in t's own location.
func AppendDate(dst []byte, t time.Time) []byte {
	y, mo, d := t.Date()
	dst = appendInt(dst, y, 4)
	dst = append(dst, '-')
	dst = appendInt(dst, int(mo), 2)
	dst = append(dst, '-')
	return appendInt(dst, d, 2)
}

func appendInt(dst []byte, v, width int) []byte {
	if v >= 0 && v < 100 && width == 2 {
		return append(dst, byte('0'+v/10), byte('0'+v%10))
	}
	if v < 0 {
		dst = append(dst, '-')
		v = -v
	}
	var buf [20]byte
	b := strconv.AppendInt(buf[:0], int64(v), 10)
	for i := len(b); i < width; i++ {
		dst = append(dst, '0')
	}
	return append(dst, b...)
}

// AppendFixed appends v with prec decimals, exactly as strconv.AppendFloat
// with format 'f' would, except that a value that rounds to zero is written
// without a minus sign ("0.0000", never "-0.0000").
func AppendFixed(dst []byte, v float64, prec int) []byte {
	if prec >= 0 && prec < len(pow10) {
		scaled := math.Abs(v) * pow10[prec]
		// Below 2^52 the product keeps a fraction bit; rounding it can then
		// differ from rounding the exact decimal expansion of v only when
		// the product lands on a tie, which goes the slow way.
		if fl := math.Floor(scaled); scaled < 1<<52 && scaled-fl != 0.5 {
			n := uint64(math.Round(scaled))
			if n != 0 && v < 0 {
				dst = append(dst, '-')
			}
			p := uint64(pow10[prec])
			dst = strconv.AppendUint(dst, n/p, 10)
			if prec > 0 {
				var frac [8]byte
				f := n % p
				for i := prec - 1; i >= 0; i-- {
					frac[i] = byte('0' + f%10)
					f /= 10
				}
				dst = append(dst, '.')
				dst = append(dst, frac[:prec]...)
			}
			return dst
		}
	}
	start := len(dst)
	dst = strconv.AppendFloat(dst, v, 'f', prec, 64)
	if dst[start] == '-' {
		for _, c := range dst[start+1:] {
			if c != '0' && c != '.' {
				return dst
			}
		}
		dst = append(dst[:start], dst[start+1:]...)
	}
	return dst
}

var pow10 = [...]float64{1, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8}
