package hourcsv

import (
	"bufio"
	"fmt"
	"io"
	"strings"
	"time"

	"etpulse/gateway/vocab"
	"etpulse/hourly"
)

// HourColumns are the columns of the hourly results CSV, in order: "time",
// then names of the vocabulary (gateway/vocab).
var HourColumns = []string{"time", vocab.ETmm, vocab.RaMJ, vocab.RsoMJ, vocab.Fcd, vocab.RnMJ, vocab.GMJ, vocab.EsKPa, vocab.EaKPa, vocab.Day, vocab.Flags}

// Decimals written for each kind of number. Fixed, so that output files can
// be compared line by line.
const (
	decET  = 4 // mm
	decMJ  = 4 // MJ m-2
	decKPa = 4 // kPa
	decFcd = 3 // dimensionless
	decT   = 2 // °C
	decU   = 2 // m/s
	decMM  = 2 // rain, mm
)

// HourWriter writes one CSV line per computed hour. Output is buffered; call
// Flush at the end.
type HourWriter struct {
	w     *bufio.Writer
	buf   []byte
	flags []string
}

// NewHourWriter returns a HourWriter on w. The header line is written by
// WriteHeader.
func NewHourWriter(w io.Writer) *HourWriter {
	return &HourWriter{w: bufio.NewWriterSize(w, 64<<10), buf: make([]byte, 0, 256)}
}

// WriteHeader writes the column names.
func (hw *HourWriter) WriteHeader() error {
	if _, err := hw.w.WriteString(strings.Join(HourColumns, ",") + "\n"); err != nil {
		return fmt.Errorf("write hour header: %w", err)
	}
	return nil
}

// Write writes the hour starting at start (written in start's location,
// which should be station standard time) with its result.
func (hw *HourWriter) Write(start time.Time, r *hourly.Result) error {
	b := AppendLocal(hw.buf[:0], start)
	for _, f := range [...]struct {
		v    float64
		prec int
	}{{r.ET, decET}, {r.Ra, decMJ}, {r.Rso, decMJ}, {r.Fcd, decFcd}, {r.Rn, decMJ}, {r.G, decMJ}, {r.Es, decKPa}, {r.Ea, decKPa}} {
		b = append(b, ',')
		b = AppendFixed(b, f.v, f.prec)
	}
	if r.Day {
		b = append(b, ",1,"...)
	} else {
		b = append(b, ",0,"...)
	}
	hw.flags = r.Flags(hw.flags[:0]) // the words of the live records (hourly.Flag*)
	for i, f := range hw.flags {
		if i > 0 {
			b = append(b, ' ')
		}
		b = append(b, f...)
	}
	b = append(b, '\n')
	hw.buf = b
	if _, err := hw.w.Write(b); err != nil {
		return fmt.Errorf("write hour: %w", err)
	}
	return nil
}

// Flush writes any buffered output.
func (hw *HourWriter) Flush() error {
	if err := hw.w.Flush(); err != nil {
		return fmt.Errorf("flush hours: %w", err)
	}
	return nil
}
