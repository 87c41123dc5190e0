// Package hourcsv reads hourly weather CSV files into hourly.Hour values and
// writes hourly and daily reference-ET results as CSV. It is the file adapter
// behind `etpulse calc`: columns are found by header name, every bad row is
// reported with its line number, column and value, and the science (vapour
// pressure, wind height, unit conversion) is done by package hourly.
package hourcsv

import (
	"bufio"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"etpulse/gateway/vocab"
	"etpulse/hourly"
)

// Input column names: the vocabulary's (gateway/vocab, "calc input").
const (
	ColTime      = "time"          // hour start: station standard time, or RFC 3339 with an offset
	ColAirTemp   = vocab.AirTempC  // mean air temperature, °C
	ColRH        = vocab.RHPct     // mean relative humidity, %
	ColDewPoint  = vocab.DewPointC // mean dew point, °C
	ColEa        = vocab.EaKPa     // actual vapour pressure, kPa
	ColWind      = vocab.WindMS    // mean wind speed at the sensor height (Options.WindHeight), m/s
	ColWind2m    = vocab.Wind2mMS  // mean wind speed at 2 m; only with a wind height of 2 m
	ColSolar     = vocab.SolarW    // mean incoming solar radiation over the hour, W m-2
	ColNetRad    = vocab.NetRadW   // optional measured net radiation, mean W m-2
	ColSoilHeat  = vocab.SoilHeatW // optional measured soil heat flux, mean W m-2, positive into the soil
	ColRain      = vocab.RainMM    // optional rain over the hour, mm
	humidityCols = ColRH + ", " + ColDewPoint + " or " + ColEa
)

// Columns lists every accepted input column, required ones first.
var Columns = []string{ColTime, ColAirTemp, ColRH, ColDewPoint, ColEa, ColWind, ColWind2m, ColSolar, ColNetRad, ColSoilHeat, ColRain}

// OldColumns maps the input column names used before the vocabulary's
// names to the names now. A header with an old name is still read, and
// Reader.Deprecations says which name replaces it, until a later release.
var OldColumns = map[string]string{
	"dewpoint_c":    ColDewPoint,
	"wind_ms":       ColWind,
	"solar_wm2":     ColSolar,
	"net_rad_wm2":   ColNetRad,
	"soil_heat_wm2": ColSoilHeat,
}

// ErrHeader is wrapped by every error about the header line: an unknown,
// duplicate or missing column. Such a file cannot be read at all.
var ErrHeader = errors.New("bad header")

// RowError is a bad data row. Reading may continue after it.
type RowError struct {
	Line   int    // 1-based line number in the input
	Column string // column name; empty when the row as a whole is bad
	Value  string // the offending cell; empty when Column is empty
	Err    error
}

// Error words the problem as "line N: column C: value "V": cause".
func (e *RowError) Error() string {
	if e.Column == "" {
		return fmt.Sprintf("line %d: %v", e.Line, e.Err)
	}
	return fmt.Sprintf("line %d: column %s: value %q: %v", e.Line, e.Column, e.Value, e.Err)
}

// Unwrap returns the cause, e.g. an error wrapping hourly.ErrInput.
func (e *RowError) Unwrap() error { return e.Err }

// Options describe the station the file comes from.
type Options struct {
	// UTCOffset is the station's standard-time offset from UTC in hours
	// (e.g. -8). Times without an offset are in this standard time; times
	// with one are converted to it.
	UTCOffset float64
	// WindHeight is the height of the wind sensor in m; wind is adjusted to
	// 2 m (FAO-56 eq. 47, by hourly.WindAt2m). Zero means 2 m.
	WindHeight float64
}

// Row is one good data row.
type Row struct {
	Line int // 1-based line number in the input
	// Hour is the row as input to hourly.Compute: Start in station standard
	// time, Ea in kPa, Wind2 at 2 m, radiation in MJ m-2 per hour.
	Hour    hourly.Hour
	Rain    float64 // mm over the hour; 0 when absent
	HasRain bool
	// Gap is the time missing between the end of the previous good row and
	// this row's start; 0 for the first row and for contiguous hours. Calc
	// reports it; hourly.CarryUsable decides whether the night cloudiness
	// carry survives it.
	Gap time.Duration
	// Note explains the gap when it looks like the hour a daylight-saving
	// clock skips; empty otherwise.
	Note string
}

type humidityKind int

const (
	humRH humidityKind = iota
	humDewPoint
	humEa
)

// Reader reads rows of an hourly weather CSV. It is not safe for
// concurrent use.
type Reader struct {
	csv        *csv.Reader
	zone       *time.Location
	nfields    int
	idxTime    int
	idxTemp    int
	idxHum     int
	hum        humidityKind
	idxWind    int
	idxSolar   int
	idxNetRad  int // -1 when absent
	idxSoil    int
	idxRain    int
	windFactor float64
	windHeight float64  // m
	names      []string // the header's column names, lower case, as the file spells them
	deprecated []string // one line per old column name in the header
	prev       time.Time
	havePrev   bool
	prevLine   int
}

// NewReader reads the header line and returns a Reader positioned at the
// first data row. Lines starting with '#' are comments; blank lines are
// ignored. The header names columns in any order (case and surrounding
// spaces do not matter). Errors about the header wrap ErrHeader.
func NewReader(r io.Reader, opt Options) (*Reader, error) {
	zone, err := StandardZone(opt.UTCOffset)
	if err != nil {
		return nil, fmt.Errorf("read weather csv: %w", err)
	}
	if opt.WindHeight == 0 {
		opt.WindHeight = 2
	}
	windFactor, err := hourly.WindFactor(opt.WindHeight)
	if err != nil {
		return nil, fmt.Errorf("read weather csv: %w", err)
	}
	br := bufio.NewReaderSize(r, 64<<10)
	if bom, _ := br.Peek(3); string(bom) == "\ufeff" {
		_, _ = br.Discard(3) // a UTF-8 byte order mark, as spreadsheets write
	}
	cr := csv.NewReader(br)
	cr.Comment = '#'
	cr.ReuseRecord = true
	cr.FieldsPerRecord = -1 // counted here, to give a better message
	head, err := cr.Read()
	if errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("read weather csv: %w: empty input, expected a header line naming the columns", ErrHeader)
	}
	if err != nil {
		var pe *csv.ParseError
		if errors.As(err, &pe) {
			return nil, fmt.Errorf("read weather csv: %w: line %d: %w", ErrHeader, pe.Line, pe.Err)
		}
		return nil, fmt.Errorf("read weather csv: %w", err)
	}
	line, _ := cr.FieldPos(0)
	if len(head) == 1 {
		for _, sep := range []string{";", "\t"} {
			if strings.Contains(head[0], sep) {
				return nil, fmt.Errorf("read weather csv: %w: line %d: the columns are separated by %q, not \",\" (a spreadsheet export for a locale with decimal commas (22,4)?): export again as CSV with \",\" between columns and \".\" as the decimal mark", ErrHeader, line, sep)
			}
		}
	}
	rd := &Reader{csv: cr, zone: zone, windFactor: windFactor, windHeight: opt.WindHeight, nfields: len(head),
		idxTime: -1, idxTemp: -1, idxHum: -1, idxWind: -1, idxSolar: -1, idxNetRad: -1, idxSoil: -1, idxRain: -1}
	if err := rd.mapHeader(head, line); err != nil {
		return nil, fmt.Errorf("read weather csv: %w", err)
	}
	return rd, nil
}

func (rd *Reader) mapHeader(head []string, line int) error {
	seen := make(map[string]int, len(head))
	canonical := make(map[string]int, len(head)) // current name -> column
	var humCols []string
	rd.names = make([]string, len(head))
	for i, raw := range head {
		name := strings.ToLower(strings.TrimSpace(raw))
		if name == "" {
			return fmt.Errorf("%w: line %d: column %d has an empty name", ErrHeader, line, i+1)
		}
		if j, dup := seen[name]; dup {
			return fmt.Errorf("%w: line %d: column %q appears twice (columns %d and %d)", ErrHeader, line, name, j+1, i+1)
		}
		seen[name] = i
		rd.names[i] = name
		if now, ok := OldColumns[name]; ok {
			rd.deprecated = append(rd.deprecated, fmt.Sprintf("column %s is now %s; the old name is read until a later release", name, now))
			name = now
		}
		if j, dup := canonical[name]; dup {
			return fmt.Errorf("%w: line %d: columns %q and %q are the new and the old name of one quantity: keep %q",
				ErrHeader, line, name, oldName(rd.names[i], rd.names[j]), name)
		}
		canonical[name] = i
		switch name {
		case ColTime:
			rd.idxTime = i
		case ColAirTemp:
			rd.idxTemp = i
		case ColRH, ColDewPoint, ColEa:
			humCols = append(humCols, rd.names[i])
			rd.idxHum = i
			switch name {
			case ColRH:
				rd.hum = humRH
			case ColDewPoint:
				rd.hum = humDewPoint
			default:
				rd.hum = humEa
			}
		case ColWind, ColWind2m:
			if rd.idxWind >= 0 {
				return fmt.Errorf("%w: line %d: columns %q and %q both give the wind: keep one", ErrHeader, line, head[rd.idxWind], raw)
			}
			rd.idxWind = i
			if name == ColWind2m && rd.windHeight != 2 {
				// The wind height belongs to wind_m_s.
				return fmt.Errorf("%w: line %d: column %q is wind at 2 m, but the wind height is %g m: name the column %q (wind at the wind height) or leave the wind height at 2 m", ErrHeader, line, name, rd.windHeight, ColWind)
			}
		case ColSolar:
			rd.idxSolar = i
		case ColNetRad:
			rd.idxNetRad = i
		case ColSoilHeat:
			rd.idxSoil = i
		case ColRain:
			rd.idxRain = i
		default:
			return fmt.Errorf("%w: line %d: unknown column %q (accepted: %s)", ErrHeader, line, raw, strings.Join(Columns, ", "))
		}
	}
	for _, req := range []struct {
		idx  int
		name string
	}{{rd.idxTime, ColTime}, {rd.idxTemp, ColAirTemp}, {rd.idxWind, ColWind}, {rd.idxSolar, ColSolar}} {
		if req.idx < 0 {
			return fmt.Errorf("%w: line %d: missing required column %q", ErrHeader, line, req.name)
		}
	}
	switch len(humCols) {
	case 0:
		return fmt.Errorf("%w: line %d: missing humidity column: give exactly one of %s", ErrHeader, line, humidityCols)
	case 1:
	default:
		slices.Sort(humCols)
		return fmt.Errorf("%w: line %d: columns %s all give humidity: give exactly one of %s", ErrHeader, line, strings.Join(humCols, " and "), humidityCols)
	}
	return nil
}

// Deprecations returns one line per old column name (OldColumns) in the
// header, in header order, naming the new name; nil when there is none.
// Calc writes them to its report.
func (rd *Reader) Deprecations() []string { return rd.deprecated }

// col is the name the file gives column i.
func (rd *Reader) col(i int) string { return rd.names[i] }

// Read returns the next good row, io.EOF at the end of the input, a
// *RowError for a bad row (reading may continue with the next call), or
// another error when the input cannot be read further.
func (rd *Reader) Read() (Row, error) {
	rec, err := rd.csv.Read()
	if err != nil {
		var pe *csv.ParseError
		if errors.As(err, &pe) {
			return Row{}, &RowError{Line: pe.Line, Err: pe.Err}
		}
		if errors.Is(err, io.EOF) {
			return Row{}, io.EOF
		}
		return Row{}, fmt.Errorf("read weather csv: %w", err)
	}
	line, _ := rd.csv.FieldPos(0)
	if len(rec) != rd.nfields {
		hint := ""
		if len(rec) > rd.nfields {
			hint = splitNumberHint(rec)
		}
		return Row{}, &RowError{Line: line, Err: fmt.Errorf("has %d fields, the header has %d%s", len(rec), rd.nfields, hint)}
	}
	row := Row{Line: line}
	h := &row.Hour

	cell := strings.TrimSpace(rec[rd.idxTime])
	start, err := parseTime(cell, rd.zone)
	if err != nil {
		return Row{}, &RowError{Line: line, Column: ColTime, Value: cell, Err: err}
	}
	if _, m, s := start.Clock(); m != 0 || s != 0 || start.Nanosecond() != 0 {
		return Row{}, &RowError{Line: line, Column: ColTime, Value: cell,
			Err: fmt.Errorf("not the start of an hour of station standard time (%s): %s", rd.zone, AppendLocal(nil, start))}
	}
	if rd.havePrev {
		if !start.After(rd.prev) {
			hint := ""
			if start.Equal(rd.prev) && localTime(cell) && fallBack(start) {
				hint = "; a repeated early-morning hour in a month when clocks go back is the daylight-saving clock change: " + standardTimeFix(rd.zone)
			}
			return Row{}, &RowError{Line: line, Column: ColTime, Value: cell,
				Err: fmt.Errorf("not after the previous hour %s (line %d): hours must be in increasing order without repeats%s", AppendLocal(nil, rd.prev), rd.prevLine, hint)}
		}
		// Sub saturates beyond about 292 years; keep the gap whole hours.
		row.Gap = (start.Sub(rd.prev) - time.Hour).Truncate(time.Hour)
		if localTime(cell) && springForward(row.Gap, start) {
			row.Note = "the daylight-saving clock change? (one early-morning hour skipped in a month when clocks go forward) If the file is in daylight-saving time, every hour from here on is one hour off: " + standardTimeFix(rd.zone)
		}
	}
	h.Start = start

	if h.AirTemp, err = rd.number(rec, rd.idxTemp, line); err != nil {
		return Row{}, err
	}
	if h.AirTemp < hourly.MinAirTemp || h.AirTemp > hourly.MaxAirTemp {
		// Checked here, before the humidity conversion uses it, so the error
		// names the right column.
		return Row{}, &RowError{Line: line, Column: rd.col(rd.idxTemp), Value: cellAt(rec, rd.idxTemp),
			Err: fmt.Errorf("outside %g..%g degC: %w", hourly.MinAirTemp, hourly.MaxAirTemp, hourly.ErrInput)}
	}
	if h.Ea, err = rd.humidity(rec, h.AirTemp, line); err != nil {
		return Row{}, err
	}
	if h.Wind2, err = rd.wind(rec, line); err != nil {
		return Row{}, err
	}
	solar, err := rd.number(rec, rd.idxSolar, line)
	if err != nil {
		return Row{}, err
	}
	h.Solar = hourly.WattsToMJ(solar, 1)
	if v, ok, err := rd.optional(rec, rd.idxNetRad, line); err != nil {
		return Row{}, err
	} else if ok {
		h.NetRad, h.HasNetRad = hourly.WattsToMJ(v, 1), true
	}
	if v, ok, err := rd.optional(rec, rd.idxSoil, line); err != nil {
		return Row{}, err
	} else if ok {
		h.SoilHeat, h.HasSoilHeat = hourly.WattsToMJ(v, 1), true
	}
	if v, ok, err := rd.optional(rec, rd.idxRain, line); err != nil {
		return Row{}, err
	} else if ok {
		if v < 0 {
			return Row{}, &RowError{Line: line, Column: rd.col(rd.idxRain), Value: cellAt(rec, rd.idxRain), Err: errors.New("rain must be >= 0 mm")}
		}
		row.Rain, row.HasRain = v, true
	}

	rd.prev, rd.havePrev, rd.prevLine = start, true, line
	return row, nil
}

func cellAt(rec []string, i int) string { return strings.TrimSpace(rec[i]) }

// number parses a required numeric cell.
func (rd *Reader) number(rec []string, i int, line int) (float64, error) {
	v, ok, err := rd.optional(rec, i, line)
	if err != nil {
		return 0, err
	}
	if !ok {
		return 0, &RowError{Line: line, Column: rd.col(i), Value: "", Err: errors.New("empty, and the column is required")}
	}
	return v, nil
}

// optional parses a numeric cell that may be empty (ok false) or absent (i < 0).
func (rd *Reader) optional(rec []string, i int, line int) (v float64, ok bool, err error) {
	if i < 0 {
		return 0, false, nil
	}
	col := rd.col(i)
	s := cellAt(rec, i)
	if s == "" {
		return 0, false, nil
	}
	v, err = strconv.ParseFloat(s, 64)
	if err != nil {
		return 0, false, &RowError{Line: line, Column: col, Value: s, Err: NotANumber(s, false)}
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, false, &RowError{Line: line, Column: col, Value: s, Err: errors.New("not a finite number")}
	}
	return v, true, nil
}

// humidity returns the hour's actual vapour pressure ea, kPa, from whichever
// humidity column the file has.
func (rd *Reader) humidity(rec []string, airTemp float64, line int) (float64, error) {
	v, err := rd.number(rec, rd.idxHum, line)
	if err != nil {
		return 0, err
	}
	var ea float64
	switch rd.hum {
	case humRH:
		ea, err = hourly.VapourPressureFromRH(airTemp, v)
	case humDewPoint:
		ea, err = hourly.VapourPressureFromDewPoint(v)
	default:
		ea = v
		if v < 0 {
			err = errors.New("vapour pressure must be >= 0 kPa")
		}
	}
	if err != nil {
		return 0, &RowError{Line: line, Column: rd.col(rd.idxHum), Value: cellAt(rec, rd.idxHum), Err: err}
	}
	return ea, nil
}

// oldName returns whichever of a and b is an old column name.
func oldName(a, b string) string {
	if _, ok := OldColumns[a]; ok {
		return a
	}
	return b
}

// wind returns the wind speed adjusted from the sensor height to 2 m.
func (rd *Reader) wind(rec []string, line int) (float64, error) {
	v, err := rd.number(rec, rd.idxWind, line)
	if err != nil {
		return 0, err
	}
	if v < 0 {
		return 0, &RowError{Line: line, Column: rd.col(rd.idxWind), Value: cellAt(rec, rd.idxWind), Err: errors.New("wind speed must be >= 0 m/s")}
	}
	return v * rd.windFactor, nil // FAO-56 eq. 47 factor from hourly.WindFactor
}
