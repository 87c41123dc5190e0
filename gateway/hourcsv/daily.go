package hourcsv

import (
	"bufio"
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	"etpulse/gateway/vocab"
	"etpulse/hourly"
)

// DayColumns are the columns of the daily results CSV, in order: "date",
// then names of the vocabulary (gateway/vocab).
var DayColumns = []string{"date", vocab.Hours, vocab.ETmm, vocab.ETDailyMM, vocab.RainMM, vocab.SolarMJ, vocab.RnMJ,
	vocab.AirTempMinC, vocab.AirTempMaxC, vocab.EaKPa, vocab.Wind2mMS}

// Day is the sum of the computed hours of one local date (station standard
// time).
type Day struct {
	Date      time.Time // midnight starting the day, station standard time
	Hours     int       // hours computed
	ET        float64   // sum of hourly reference ET, mm
	Rain      float64   // sum of the hours' rain, mm
	RainHours int       // hours with a rain value
	Solar     float64   // sum of hourly Rs, MJ m-2
	NetRad    float64   // sum of hourly Rn, MJ m-2
	TMin      float64   // lowest hourly mean air temperature, °C
	TMax      float64   // highest hourly mean air temperature, °C
	Ea        float64   // mean of the hours' actual vapour pressure, kPa
	Wind2     float64   // mean of the hours' wind speed at 2 m, m/s
}

// DayAccumulator sums hours into days. The zero value is ready to use.
type DayAccumulator struct {
	cur  Day
	open bool
}

// Add adds one computed hour. When the hour starts a new date, the finished
// previous day is returned with ok true.
func (a *DayAccumulator) Add(row *Row, res *hourly.Result) (done Day, ok bool) {
	y, m, d := row.Hour.Start.Date()
	date := time.Date(y, m, d, 0, 0, 0, 0, row.Hour.Start.Location())
	if a.open && !date.Equal(a.cur.Date) {
		done, ok = a.finish(), true
	}
	if !a.open {
		a.cur = Day{Date: date, TMin: math.Inf(1), TMax: math.Inf(-1)}
		a.open = true
	}
	c := &a.cur
	c.Hours++
	c.ET += res.ET
	if row.HasRain {
		c.Rain += row.Rain
		c.RainHours++
	}
	c.Solar += row.Hour.Solar
	c.NetRad += res.Rn
	c.TMin = math.Min(c.TMin, row.Hour.AirTemp)
	c.TMax = math.Max(c.TMax, row.Hour.AirTemp)
	c.Ea += res.Ea
	c.Wind2 += row.Hour.Wind2
	return done, ok
}

// Finish returns the day in progress, if any, and resets the accumulator.
func (a *DayAccumulator) Finish() (Day, bool) {
	if !a.open {
		return Day{}, false
	}
	return a.finish(), true
}

func (a *DayAccumulator) finish() Day {
	d := a.cur
	n := float64(d.Hours)
	d.Ea /= n
	d.Wind2 /= n
	a.cur, a.open = Day{}, false
	return d
}

// DayWriter writes one CSV line per day. Output is buffered; call Flush at
// the end.
type DayWriter struct {
	w   *bufio.Writer
	buf []byte
}

// NewDayWriter returns a DayWriter on w.
func NewDayWriter(w io.Writer) *DayWriter {
	return &DayWriter{w: bufio.NewWriter(w), buf: make([]byte, 0, 256)}
}

// WriteHeader writes the column names.
func (dw *DayWriter) WriteHeader() error {
	if _, err := dw.w.WriteString(strings.Join(DayColumns, ",") + "\n"); err != nil {
		return fmt.Errorf("write day header: %w", err)
	}
	return nil
}

// Write writes day d. dailyET is the daily-equation reference ET in mm;
// when hasDaily is false the column is left empty (e.g. an incomplete day).
// The rain column is empty when no hour of the day had a rain value.
func (dw *DayWriter) Write(d Day, dailyET float64, hasDaily bool) error {
	b := AppendDate(dw.buf[:0], d.Date)
	b = append(b, ',')
	b = appendInt(b, d.Hours, 1)
	b = append(b, ',')
	b = AppendFixed(b, d.ET, decET)
	b = append(b, ',')
	if hasDaily {
		b = AppendFixed(b, dailyET, decET)
	}
	b = append(b, ',')
	if d.RainHours > 0 {
		b = AppendFixed(b, d.Rain, decMM)
	}
	for _, f := range [...]struct {
		v    float64
		prec int
	}{{d.Solar, decMJ}, {d.NetRad, decMJ}, {d.TMin, decT}, {d.TMax, decT}, {d.Ea, decKPa}, {d.Wind2, decU}} {
		b = append(b, ',')
		b = AppendFixed(b, f.v, f.prec)
	}
	b = append(b, '\n')
	dw.buf = b
	if _, err := dw.w.Write(b); err != nil {
		return fmt.Errorf("write day: %w", err)
	}
	return nil
}

// Flush writes any buffered output.
func (dw *DayWriter) Flush() error {
	if err := dw.w.Flush(); err != nil {
		return fmt.Errorf("flush days: %w", err)
	}
	return nil
}

// writeDay writes d with the daily-equation ET, computed only for a complete
// day of 24 hours: a partial day's aggregates would not describe the day.
func writeDay(dw *DayWriter, opt CalcOptions, d Day) error {
	if d.Hours < 24 {
		return dw.Write(d, 0, false)
	}
	et, err := DailyET(opt.Station, opt.Reference, d)
	if err != nil {
		return fmt.Errorf("day %s: %w", AppendDate(nil, d.Date), err)
	}
	return dw.Write(d, et, true)
}
