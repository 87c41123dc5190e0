package controllers

import (
	"fmt"
	"time"
)

// Window is an allowed watering window of local standard time, e.g.
// 21:00-05:00. A window whose end is not after its start crosses midnight;
// 00:00-24:00 is the whole day (a run never spans midnight in it).
// Times are the station's standard time all year: a window does not move
// when daylight-saving time starts or ends.
type Window struct {
	Start, End int // minutes after midnight: Start 0-1439, End 0-1440
}

// ParseWindow parses "HH:MM-HH:MM".
func ParseWindow(s string) (Window, error) {
	var h1, m1, h2, m2 int
	if n, err := fmt.Sscanf(s, "%d:%d-%d:%d", &h1, &m1, &h2, &m2); err != nil || n != 4 {
		return Window{}, fmt.Errorf("window %q: want HH:MM-HH:MM: %w", s, ErrInput)
	}
	if h1 < 0 || h1 > 23 || h2 < 0 || h2 > 24 || m1 < 0 || m1 > 59 || m2 < 0 || m2 > 59 || (h2 == 24 && m2 != 0) {
		return Window{}, fmt.Errorf("window %q: hours 0-23 (24:00 allowed as end), minutes 0-59: %w", s, ErrInput)
	}
	w := Window{Start: h1*60 + m1, End: h2*60 + m2}
	if w.Start == w.End {
		return Window{}, fmt.Errorf("window %q: start equals end: %w", s, ErrInput)
	}
	return w, nil
}

func (w Window) String() string {
	return fmt.Sprintf("%02d:%02d-%02d:%02d", w.Start/60, w.Start%60, w.End/60, w.End%60)
}

// length returns the window's length.
func (w Window) length() time.Duration {
	m := w.End - w.Start
	if m <= 0 {
		m += 1440
	}
	return time.Duration(m) * time.Minute
}

// Slot is one occurrence of a window.
type Slot struct {
	Start, End time.Time
}

// SlotAt returns the occurrence of any of the windows that contains t (the
// earliest-starting one), or ok false when t is outside every window.
// loc is the station's standard time.
func SlotAt(ws []Window, loc *time.Location, t time.Time) (Slot, bool) {
	var best Slot
	ok := false
	for _, s := range slotsAround(ws, loc, t) {
		if !s.Start.After(t) && s.End.After(t) && (!ok || s.Start.Before(best.Start)) {
			best, ok = s, true
		}
	}
	return best, ok
}

// NextSlotStart returns the earliest window start strictly after t.
func NextSlotStart(ws []Window, loc *time.Location, t time.Time) time.Time {
	var best time.Time
	for _, s := range slotsAround(ws, loc, t) {
		if s.Start.After(t) && (best.IsZero() || s.Start.Before(best)) {
			best = s.Start
		}
	}
	return best
}

func slotsAround(ws []Window, loc *time.Location, t time.Time) []Slot {
	lt := t.In(loc)
	y, m, d := lt.Date()
	var out []Slot
	for off := -1; off <= 1; off++ {
		day := time.Date(y, m, d+off, 0, 0, 0, 0, loc)
		for _, w := range ws {
			s := day.Add(time.Duration(w.Start) * time.Minute)
			out = append(out, Slot{Start: s, End: s.Add(w.length())})
		}
	}
	return out
}

// dayKey names the standard-time calendar day of t.
func dayKey(t time.Time, loc *time.Location) string { return t.In(loc).Format("2006-01-02") }
