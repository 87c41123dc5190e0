package hourcsv

import (
	"context"
	"errors"
	"fmt"
	"io"
	"time"

	"etpulse/hourly"
)

// CalcOptions configure Calc.
type CalcOptions struct {
	Station    hourly.Station
	Reference  hourly.Reference
	WindHeight float64 // m; zero means 2 m
	Daily      bool    // write one line per local date instead of one per hour
	// SkipBad reports bad rows to Report and continues; otherwise the first
	// bad row ends the run with its error.
	SkipBad bool
	// Report receives one line per non-fatal event: old column names in
	// the header (Reader.Deprecations), gaps in the hours, and skipped rows
	// when SkipBad is set. Nil discards them.
	Report io.Writer
}

// Summary counts what Calc did.
type Summary struct {
	Hours   int // hours computed and written (or summed into days)
	Days    int // days written (Daily only)
	Skipped int // bad rows skipped (SkipBad only)
	Gaps    int // gaps in the sequence of hours
}

// Calc reads an hourly weather CSV from in, computes the reference ET of
// every hour with hourly.Compute and writes the results CSV to out. It
// passes the night cloudiness carry from hour to hour across gaps and
// skipped rows, as the live gateway does; hourly.CarryUsable drops a carry
// older than the current night, so no value is bridged across a missed day.
//
// A bad header is an error wrapping ErrHeader; a bad row (without SkipBad)
// is a *RowError, including a row that hourly.Compute rejects.
func Calc(ctx context.Context, in io.Reader, out io.Writer, opt CalcOptions) (Summary, error) {
	var sum Summary
	if err := opt.Station.Validate(); err != nil {
		return sum, fmt.Errorf("calc: %w", err)
	}
	opt.Station = opt.Station.Prepared() // the pressure once, not per row
	if _, err := hourly.ParseReference(string(opt.Reference)); err != nil {
		return sum, fmt.Errorf("calc: %w", err)
	}
	report := opt.Report
	if report == nil {
		report = io.Discard
	}
	rd, err := NewReader(in, Options{UTCOffset: opt.Station.UTCOffset, WindHeight: opt.WindHeight})
	if err != nil {
		return sum, fmt.Errorf("calc: %w", err)
	}
	for _, line := range rd.Deprecations() {
		fmt.Fprintln(report, line)
	}

	var (
		hw    *HourWriter
		dw    *DayWriter
		acc   DayAccumulator
		carry hourly.Carry
	)
	if opt.Daily {
		dw = NewDayWriter(out)
		err = dw.WriteHeader()
	} else {
		hw = NewHourWriter(out)
		err = hw.WriteHeader()
	}
	if err != nil {
		return sum, fmt.Errorf("calc: %w", err)
	}
	flush := func() error {
		if dw != nil {
			if d, ok := acc.Finish(); ok {
				if err := writeDay(dw, opt, d); err != nil {
					return err
				}
				sum.Days++
			}
			return dw.Flush()
		}
		return hw.Flush()
	}
	bad := func(err error) error {
		if !opt.SkipBad {
			return err
		}
		sum.Skipped++
		fmt.Fprintf(report, "skipped %v\n", err)
		return nil
	}

	for n := 0; ; n++ {
		if n&1023 == 0 && ctx.Err() != nil {
			_ = flush() // best effort: the run is abandoned anyway
			return sum, fmt.Errorf("calc: %w", context.Cause(ctx))
		}
		row, err := rd.Read()
		if err != nil {
			if errors.Is(err, io.EOF) {
				break
			}
			var re *RowError
			if !errors.As(err, &re) {
				return sum, fmt.Errorf("calc: %w", err)
			}
			if err := bad(re); err != nil {
				_ = flush() // keep the hours already computed; the data error is what matters
				return sum, fmt.Errorf("calc: %w", err)
			}
			continue
		}
		if row.Gap > 0 {
			sum.Gaps++
			note := ""
			if row.Note != "" {
				note = ": " + row.Note
			}
			fmt.Fprintf(report, "line %d: %s missing before %s%s\n",
				row.Line, describeGap(row.Gap), AppendLocal(nil, row.Hour.Start), note)
		}
		res, next, err := hourly.Compute(opt.Station, opt.Reference, row.Hour, carry)
		if err != nil {
			if !errors.Is(err, hourly.ErrInput) {
				return sum, fmt.Errorf("calc: line %d: %w", row.Line, err)
			}
			if err := bad(&RowError{Line: row.Line, Err: err}); err != nil {
				_ = flush()
				return sum, fmt.Errorf("calc: %w", err)
			}
			continue
		}
		carry = next
		sum.Hours++
		if dw != nil {
			if d, ok := acc.Add(&row, &res); ok {
				if err := writeDay(dw, opt, d); err != nil {
					return sum, fmt.Errorf("calc: %w", err)
				}
				sum.Days++
			}
			continue
		}
		if err := hw.Write(row.Hour.Start, &res); err != nil {
			return sum, fmt.Errorf("calc: %w", err)
		}
	}
	if err := flush(); err != nil {
		return sum, fmt.Errorf("calc: %w", err)
	}
	return sum, nil
}

// describeGap words a gap for a report line: "3 hours", "1 hour", "90m0s".
func describeGap(d time.Duration) string {
	if d%time.Hour != 0 {
		return d.String()
	}
	if n := int64(d / time.Hour); n != 1 {
		return fmt.Sprintf("%d hours", n)
	}
	return "1 hour"
}
