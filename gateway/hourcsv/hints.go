package hourcsv

import (
	"errors"
	"fmt"
	"strings"
	"time"
	"unicode"
)

// NumberHint looks at a cell that did not parse as a number and returns the
// number it probably means and why it did not parse: "decimal comma" for
// "22,4", `unit "°C"` for "22.4 °C". It returns two empty strings when it
// has no guess. The readers of `etpulse calc` and `etpulse replay` add the
// hint to their "not a number" errors.
func NumberHint(s string) (fixed, why string) {
	s = strings.TrimSpace(s)
	if n := numberPrefix(s); n > 0 && n < len(s) {
		num, rest := s[:n], strings.TrimSpace(s[n:])
		if looksLikeUnit(rest) {
			return num, fmt.Sprintf("unit %q", rest)
		}
	}
	if i := strings.IndexByte(s, ','); i > 0 && strings.Count(s, ",") == 1 && !strings.Contains(s, ".") {
		if fixed := s[:i] + "." + s[i+1:]; numberPrefix(fixed) == len(fixed) && isDigit(s[i-1]) && i+1 < len(s) {
			return fixed, "decimal comma"
		}
	}
	return "", ""
}

// numberPrefix is the length of the leading decimal number of s: optional
// sign, digits, optional point and digits.
func numberPrefix(s string) int {
	i := 0
	if i < len(s) && (s[i] == '-' || s[i] == '+') {
		i++
	}
	start := i
	for i < len(s) && isDigit(s[i]) {
		i++
	}
	if i < len(s) && s[i] == '.' {
		i++
		for i < len(s) && isDigit(s[i]) {
			i++
		}
	}
	if i == start || (i == start+1 && s[start] == '.') {
		return 0
	}
	return i
}

func isDigit(b byte) bool { return b >= '0' && b <= '9' }

// NotANumber is the error for a cell that is not a number, with the hint of
// NumberHint when there is one. With unitColumn the file has a unit column
// (the readings CSV of `etpulse replay`) and a unit found in the value is
// sent there, spelled as the configuration spells it; without, the column
// name gives the unit (the weather CSV of `etpulse calc`).
func NotANumber(cell string, unitColumn bool) error {
	fixed, why := NumberHint(cell)
	switch {
	case why == "decimal comma":
		return fmt.Errorf("not a number: a decimal comma; write %s (a point is the decimal mark)", fixed)
	case why != "" && unitColumn:
		unit := strings.TrimSpace(strings.TrimSpace(cell)[len(fixed):])
		return fmt.Errorf("not a number: the %s is in the value; write %s (the unit goes in the unit column: %s)", why, fixed, unitSpelling(unit))
	case why != "":
		return fmt.Errorf("not a number: the %s is in the value; write %s (the column name gives the unit)", why, fixed)
	}
	return errors.New("not a number")
}

// unitSpellings maps units as people type them to the configuration's
// spelling.
var unitSpellings = map[string]string{"°c": "degC", "c": "degC", "degc": "degC", "°f": "degF", "f": "degF", "degf": "degF",
	"w/m²": "W/m2", "wm2": "W/m2", "w m-2": "W/m2", "w/m2": "W/m2", "kpa": "kPa", "hpa": "hPa", "m/s": "m/s", "mm": "mm", "%": "%"}

// unitSpelling is the configuration's spelling of a typed unit, or the unit
// as typed when it has none.
func unitSpelling(u string) string {
	if s, ok := unitSpellings[strings.ToLower(strings.ReplaceAll(u, " ", ""))]; ok {
		return s
	}
	if s, ok := unitSpellings[strings.ToLower(u)]; ok {
		return s
	}
	return u
}

// splitNumberHint explains a row with more fields than the header when two
// neighbouring cells look like the halves of a decimal-comma number.
func splitNumberHint(rec []string) string {
	for i := 0; i+1 < len(rec); i++ {
		a, b := strings.TrimSpace(rec[i]), strings.TrimSpace(rec[i+1])
		if a != "" && b != "" && numberPrefix(a) == len(a) && !strings.Contains(a, ".") && allDigits(b) {
			return fmt.Sprintf(": a decimal comma (%s,%s) splits a number in two; write %s.%s (a point is the decimal mark)", a, b, a, b)
		}
	}
	return ""
}

func allDigits(s string) bool {
	return s != "" && strings.IndexFunc(s, func(r rune) bool { return !unicode.IsDigit(r) }) < 0
}

// Months in which clocks change somewhere (northern hemisphere forward in
// March/April and back in October/November, southern forward in
// September/October and back in March/April) and the latest local hour at
// which they do. Common practice, no source.
var (
	forwardMonths     = map[time.Month]bool{time.March: true, time.April: true, time.September: true, time.October: true}
	backMonths        = map[time.Month]bool{time.March: true, time.April: true, time.October: true, time.November: true}
	clockChangeLatest = 3
)

// springForward reports whether a one-hour gap before start (a local time
// without offset) looks like the hour a daylight-saving clock skips.
func springForward(gap time.Duration, start time.Time) bool {
	missing := start.Add(-time.Hour)
	return gap == time.Hour && forwardMonths[missing.Month()] && missing.Hour() <= clockChangeLatest
}

// fallBack reports whether a repeated local hour looks like the hour a
// daylight-saving clock repeats.
func fallBack(start time.Time) bool {
	return backMonths[start.Month()] && start.Hour() <= clockChangeLatest
}

// standardTimeFix is the fix named by the clock-change hints.
func standardTimeFix(zone *time.Location) string {
	return fmt.Sprintf("give times in standard time (%s) or RFC 3339 with their offset", zone)
}

// localTime reports whether a time cell has no UTC offset (and so is read
// as station standard time).
func localTime(cell string) bool {
	return len(cell) < 16 || !strings.ContainsAny(cell[16:], "Zz+-")
}

// unitWords are unit spellings without '°', '%' or '/' that a value may
// carry.
var unitWords = map[string]bool{"c": true, "f": true, "k": true, "degc": true, "degf": true, "mm": true, "in": true,
	"mph": true, "kn": true, "kt": true, "wm2": true, "w m-2": true, "kpa": true, "hpa": true, "mbar": true, "pa": true}

// looksLikeUnit reports whether the text after a number looks like a unit.
func looksLikeUnit(rest string) bool {
	if rest == "" || strings.ContainsAny(rest, "0123456789,.") {
		return false
	}
	return strings.ContainsAny(rest, "°%/²") || unitWords[strings.ToLower(rest)]
}
