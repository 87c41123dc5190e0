package httpapi

import (
	"fmt"
	"math"
	"strings"
	"time"

	"etpulse/gateway/status"
)

// Charts are drawn on the server as inline SVG: a chart is a list of shapes
// with classes (the stylesheet gives them meaning), so the page needs no
// script and no fetch.

// chart is one SVG chart in its own coordinate space.
type chart struct {
	W, H   float64
	Title  string // the accessible name
	Shades []shape
	Bars   []shape
	Lines  []polyline
	Rules  []rule
	Marks  []shape
	Over   []rule // drawn over the bars (the depletion bar's ticks)
	Texts  []text
}

type shape struct {
	X, Y, W, H float64
	Class      string
	Title      string
}

type polyline struct {
	Points string
	Class  string
	N      int // number of points
}

type rule struct {
	X1, Y1, X2, Y2 float64
	Class          string
}

type text struct {
	X, Y   float64
	Text   string
	Anchor string
	Class  string
}

const (
	plotLeft   = 52.0 // room for the axis labels (19px on a phone)
	plotRight  = 70.0
	plotTop    = 10.0
	plotBottom = 18.0
)

// scale maps [0, top] onto the plot's height.
type scale struct {
	top    float64
	y0, y1 float64 // pixel rows of 0 and top
}

func (s scale) y(v float64) float64 {
	if s.top <= 0 {
		return s.y0
	}
	return s.y0 + (s.y1-s.y0)*v/s.top
}

// niceTop rounds a maximum up to 1, 2 or 5 times a power of ten.
func niceTop(v, floor float64) float64 {
	v = max(v, floor)
	p := math.Pow(10, math.Floor(math.Log10(v)))
	for _, m := range []float64{1, 2, 5, 10} {
		if m*p >= v {
			return m * p
		}
	}
	return 10 * p
}

func f2(v float64) string { return fmt.Sprintf("%.2f", v) }

// hourAxis places the hours of [from, from+n h) on x.
type hourAxis struct {
	from  time.Time
	n     int
	width float64
}

func (a hourAxis) x(t time.Time) float64 {
	return plotLeft + a.width*t.Sub(a.from).Hours()/float64(a.n)
}
func (a hourAxis) step() float64 { return a.width / float64(a.n) }

// localClock formats t in a station's standard time.
func localClock(t time.Time, offsetHours float64, layout string) string {
	return t.UTC().Add(time.Duration(offsetHours * float64(time.Hour))).Format(layout)
}

// dayTicks labels every local midnight of the axis.
func dayTicks(c *chart, a hourAxis, offset float64) {
	for i := 0; i <= a.n; i++ {
		t := a.from.Add(time.Duration(i) * time.Hour)
		if localClock(t, offset, "15") != "00" {
			continue
		}
		x := a.x(t)
		c.Rules = append(c.Rules, rule{X1: x, Y1: plotTop, X2: x, Y2: c.H - plotBottom, Class: "tick"})
		c.Texts = append(c.Texts, text{X: x + 2, Y: c.H - 4, Text: localClock(t, offset, "Mon 2 Jan"), Anchor: "start", Class: "axis"})
	}
}

// nightShades shades the hours without sun: clear-sky Rso of zero (sun
// geometry alone, so a faulty pyranometer cannot move the night), or the
// record's own day flag when Rso is absent.
func nightShades(c *chart, a hourAxis, hours []status.HourView) {
	for _, h := range hours {
		night := !h.Day
		if h.Rso != nil {
			night = *h.Rso <= 0
		}
		if night {
			c.Shades = append(c.Shades, shape{X: a.x(h.Start), Y: plotTop, W: a.step(), H: c.H - plotTop - plotBottom, Class: "night"})
		}
	}
}

func yLabels(c *chart, s scale, unit string, right bool) {
	x, anchor := plotLeft-3, "end"
	if right {
		x, anchor = c.W-plotRight+3, "start"
	}
	c.Texts = append(c.Texts,
		text{X: x, Y: s.y(s.top) + 8, Text: trimNum(s.top) + unit, Anchor: anchor, Class: "axis"},
		text{X: x, Y: s.y(0), Text: "0", Anchor: anchor, Class: "axis"})
	c.Rules = append(c.Rules, rule{X1: plotLeft, Y1: s.y(0), X2: c.W - plotRight, Y2: s.y(0), Class: "base"})
}

func trimNum(v float64) string {
	s := fmt.Sprintf("%.2f", v)
	s = strings.TrimRight(strings.TrimRight(s, "0"), ".")
	return s
}

// etChart draws the hourly reference ET as bars, nights shaded, and a row
// of marks under the hours that were revised, gap-filled or flagged.
func etChart(pg status.StationPage) chart {
	c := chart{W: 760, H: 190, Title: "hourly " + pg.Summary.ETLabel + ", mm"}
	a := hourAxis{from: pg.From, n: status.StationHours, width: c.W - plotLeft - plotRight}
	top := 0.0
	for _, h := range pg.Hours {
		if h.ET != nil {
			top = max(top, *h.ET)
		}
	}
	markRow := c.H - plotBottom - 8
	s := scale{top: niceTop(top, 0.1), y0: markRow - 4, y1: plotTop}
	nightShades(&c, a, pg.Hours)
	for _, h := range pg.Hours {
		x := a.x(h.Start)
		if h.ET != nil {
			y := s.y(max(0, *h.ET))
			c.Bars = append(c.Bars, shape{X: x + 1, Y: y, W: max(1, a.step()-2), H: s.y0 - y, Class: "et",
				Title: fmt.Sprintf("%s %s %.3f mm", h.Local, pg.Summary.ETLabel, *h.ET)})
		}
		cls, why := "", []string{}
		if h.Revision > 0 {
			cls, why = "mark-revised", append(why, fmt.Sprintf("revision %d", h.Revision))
		}
		if h.Fill != "" {
			cls, why = "mark-filled", append(why, "filled: "+h.Fill)
		}
		if len(h.Flags) > 0 || !h.Complete {
			cls = "mark-flag"
			why = append(why, h.Flags...)
			if !h.Complete {
				why = append(why, "incomplete hour")
			}
		}
		if cls != "" {
			c.Marks = append(c.Marks, shape{X: x + 1, Y: markRow, W: max(1, a.step()-2), H: 6, Class: cls, Title: h.Local + ": " + strings.Join(why, "; ")})
		}
	}
	yLabels(&c, s, "", false)
	dayTicks(&c, a, pg.Summary.UTCOffsetHours)
	return c
}

// lineOf joins the hours that have a value into one polyline.
func lineOf(a hourAxis, s scale, hours []status.HourView, val func(status.HourView) *float64, class string) polyline {
	var b strings.Builder
	n := 0
	for _, h := range hours {
		v := val(h)
		if v == nil {
			continue
		}
		if n > 0 {
			b.WriteByte(' ')
		}
		fmt.Fprintf(&b, "%s,%s", f2(a.x(h.Start)+a.step()/2), f2(s.y(*v)))
		n++
	}
	return polyline{Points: b.String(), Class: class, N: n}
}

// radiationChart draws measured Rs against clear-sky Rso (MJ m-2 per hour).
func radiationChart(pg status.StationPage) chart {
	c := chart{W: 760, H: 170, Title: "Rs against Rso, MJ/m2 per hour"}
	a := hourAxis{from: pg.From, n: status.StationHours, width: c.W - plotLeft - plotRight}
	top := 0.0
	for _, h := range pg.Hours {
		for _, v := range []*float64{h.Rs, h.Rso} {
			if v != nil {
				top = max(top, *v)
			}
		}
	}
	s := scale{top: niceTop(top, 0.5), y0: c.H - plotBottom, y1: plotTop}
	nightShades(&c, a, pg.Hours)
	c.Lines = append(c.Lines,
		lineOf(a, s, pg.Hours, func(h status.HourView) *float64 { return h.Rso }, "rso"),
		lineOf(a, s, pg.Hours, func(h status.HourView) *float64 { return h.Rs }, "rs"))
	yLabels(&c, s, "", false)
	dayTicks(&c, a, pg.Summary.UTCOffsetHours)
	return c
}

// airChart draws air temperature (left scale) and relative humidity
// (right scale, 0-100 %).
func airChart(pg status.StationPage) chart {
	c := chart{W: 760, H: 170, Title: "air temperature and relative humidity"}
	a := hourAxis{from: pg.From, n: status.StationHours, width: c.W - plotLeft - plotRight}
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, h := range pg.Hours {
		if h.AirTemp != nil {
			lo, hi = min(lo, *h.AirTemp), max(hi, *h.AirTemp)
		}
	}
	if math.IsInf(lo, 0) {
		lo, hi = 0, 30
	}
	lo = math.Floor(lo/5) * 5
	hi = max(lo+5, math.Ceil(hi/5)*5)
	y0, y1 := c.H-plotBottom, plotTop
	ty := func(v float64) float64 { return y0 + (y1-y0)*(v-lo)/(hi-lo) }
	nightShades(&c, a, pg.Hours)
	rh := scale{top: 100, y0: y0, y1: y1}
	c.Lines = append(c.Lines, lineOf(a, rh, pg.Hours, func(h status.HourView) *float64 { return h.RH }, "rh"))
	var b strings.Builder
	n := 0
	for _, h := range pg.Hours {
		if h.AirTemp == nil {
			continue
		}
		if n > 0 {
			b.WriteByte(' ')
		}
		fmt.Fprintf(&b, "%s,%s", f2(a.x(h.Start)+a.step()/2), f2(ty(*h.AirTemp)))
		n++
	}
	c.Lines = append(c.Lines, polyline{Points: b.String(), Class: "temp", N: n})
	c.Texts = append(c.Texts,
		text{X: plotLeft - 3, Y: y1 + 8, Text: trimNum(hi) + "°C", Anchor: "end", Class: "axis"},
		text{X: plotLeft - 3, Y: y0, Text: trimNum(lo) + "°C", Anchor: "end", Class: "axis"},
		text{X: c.W - plotRight + 3, Y: y1 + 8, Text: "100%", Anchor: "start", Class: "axis"},
		text{X: c.W - plotRight + 3, Y: y0, Text: "0%", Anchor: "start", Class: "axis"})
	dayTicks(&c, a, pg.Summary.UTCOffsetHours)
	return c
}

// depletionChart draws depletion over the zone window, drawn downwards
// from field capacity, with TAW, RAW, the trigger and the refill target.
func depletionChart(pg status.ZonePage) chart {
	c := chart{W: 760, H: 210, Title: "depletion, mm below field capacity"}
	n := int(math.Round(pg.To.Sub(pg.From).Hours()))
	if n < 1 {
		n = 1
	}
	a := hourAxis{from: pg.From, n: n, width: c.W - plotLeft - plotRight}
	top := max(pg.Summary.TAW, pg.Summary.Trigger)
	for _, st := range pg.Steps {
		top = max(top, st.Depletion, st.TAW)
	}
	s := scale{top: niceTop(top, 5), y0: plotTop, y1: c.H - plotBottom}
	right := c.W - plotRight
	hline := func(v float64, class, label string) {
		if v <= 0 {
			return
		}
		y := s.y(v)
		c.Rules = append(c.Rules, rule{X1: plotLeft, Y1: y, X2: right, Y2: y, Class: class})
		c.Texts = append(c.Texts, text{X: right + 3, Y: y + 4, Text: label, Anchor: "start", Class: "axis " + class})
	}
	hline(pg.Summary.TAW, "taw", "TAW")
	hline(pg.Summary.RAW, "raw", "RAW")
	hline(pg.Summary.Trigger, "trigger", "trigger")
	hline(pg.Summary.Target, "target", "refill")
	var b strings.Builder
	for i, st := range pg.Steps {
		if i > 0 {
			b.WriteByte(' ')
		}
		fmt.Fprintf(&b, "%s,%s", f2(a.x(st.Time)), f2(s.y(max(0, st.Depletion))))
	}
	c.Lines = append(c.Lines, polyline{Points: b.String(), Class: "depletion", N: len(pg.Steps)})
	c.Rules = append(c.Rules, rule{X1: plotLeft, Y1: s.y(0), X2: right, Y2: s.y(0), Class: "base"})
	c.Texts = append(c.Texts,
		text{X: plotLeft - 3, Y: s.y(0) + 8, Text: "0", Anchor: "end", Class: "axis"},
		text{X: plotLeft - 3, Y: s.y(s.top), Text: trimNum(s.top), Anchor: "end", Class: "axis"})
	return c
}

// waterChart draws each day's irrigation and effective rain as bars.
func waterChart(pg status.ZonePage) chart {
	c := chart{W: 760, H: 160, Title: "irrigation and effective rain per day, mm"}
	top := 0.0
	for _, d := range pg.Days {
		top = max(top, d.Irrigation, d.EffRain)
	}
	s := scale{top: niceTop(top, 1), y0: c.H - plotBottom, y1: plotTop}
	slot := (c.W - plotLeft - plotRight) / float64(max(1, len(pg.Days)))
	bw := max(2, slot/2-3)
	for i, d := range pg.Days {
		x := plotLeft + float64(i)*slot
		if d.Irrigation > 0 {
			y := s.y(d.Irrigation)
			c.Bars = append(c.Bars, shape{X: x + 2, Y: y, W: bw, H: s.y0 - y, Class: "irrigation", Title: fmt.Sprintf("%s irrigation %.1f mm", d.Date, d.Irrigation)})
		}
		if d.EffRain > 0 {
			y := s.y(d.EffRain)
			c.Bars = append(c.Bars, shape{X: x + 2 + bw + 2, Y: y, W: bw, H: s.y0 - y, Class: "rain", Title: fmt.Sprintf("%s effective rain %.1f mm", d.Date, d.EffRain)})
		}
		if i%2 == 0 || len(pg.Days) <= 7 {
			c.Texts = append(c.Texts, text{X: x + slot/2, Y: c.H - 4, Text: d.Date[5:], Anchor: "middle", Class: "axis"})
		}
	}
	yLabels(&c, s, "", false)
	return c
}

// depletionBar is the overview's bar: the track is TAW, the fill the
// depletion, with ticks at the refill target, RAW and the trigger.
func depletionBar(z status.ZoneSummary) chart {
	c := chart{W: 300, H: 26, Title: fmt.Sprintf("depletion %.1f of TAW %.1f mm", z.Depletion, z.TAW)}
	full := max(z.TAW, z.Depletion, z.Trigger, 1)
	x := func(v float64) float64 { return 2 + (c.W-4)*max(0, v)/full }
	c.Shades = append(c.Shades, shape{X: 2, Y: 6, W: x(z.TAW) - 2, H: 14, Class: "track"})
	cls := "fill"
	if z.Depletion >= z.Trigger && z.Trigger > 0 {
		cls = "fill due"
	}
	c.Bars = append(c.Bars, shape{X: 2, Y: 6, W: x(z.Depletion) - 2, H: 14, Class: cls, Title: c.Title})
	for _, t := range []struct {
		v     float64
		class string
	}{{z.Target, "target"}, {z.RAW, "raw"}, {z.Trigger, "trigger"}} {
		if t.v > 0 {
			c.Over = append(c.Over, rule{X1: x(t.v), Y1: 2, X2: x(t.v), Y2: 24, Class: t.class})
		}
	}
	return c
}
