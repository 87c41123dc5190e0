package store

import (
	"bufio"
	"encoding/csv"
	"fmt"
	"io"
	"slices"
	"strconv"
	"time"
)

// ExportLineProtocol writes the history points matching f as InfluxDB line
// protocol, one point per line with nanosecond timestamps: the lines the
// writer sends (notes are local only), ready to post to a server's write API
// with precision=ns. It returns the number of points written.
func ExportLineProtocol(w io.Writer, h *History, f Filter) (int, error) {
	bw := bufio.NewWriter(w)
	n := 0
	var buf []byte
	err := h.Range(f, func(p Point) error {
		buf = AppendLine(buf[:0], p)
		buf = append(buf, '\n')
		n++
		_, err := bw.Write(buf)
		return err
	})
	if err != nil {
		return n, fmt.Errorf("export lp: %w", err)
	}
	if err := bw.Flush(); err != nil {
		return n, fmt.Errorf("export lp: %w", err)
	}
	return n, nil
}

// ExportCSV writes the history points matching f as CSV: one row per point,
// columns time (RFC 3339, UTC), measurement, then every tag, field and note
// key found (tags first, each group sorted); a cell is empty when the point
// has no such key. Header and rows come from one read transaction, so a
// point written meanwhile cannot bring a column the header lacks. It
// returns the number of rows written.
func ExportCSV(w io.Writer, h *History, f Filter) (int, error) {
	n := 0
	err := h.View(func(rng RangeFunc) error {
		var err error
		n, err = exportCSV(w, rng, f)
		return err
	})
	return n, err
}

func exportCSV(w io.Writer, rng RangeFunc, f Filter) (int, error) {
	tagKeys, fieldKeys, noteKeys := map[string]bool{}, map[string]bool{}, map[string]bool{}
	err := rng(f, func(p Point) error {
		for k := range p.Tags {
			tagKeys[k] = true
		}
		for k := range p.Fields {
			fieldKeys[k] = true
		}
		for k := range p.Notes {
			noteKeys[k] = true
		}
		return nil
	})
	if err != nil {
		return 0, fmt.Errorf("export csv: %w", err)
	}
	cols := []string{"time", "measurement"}
	seen := map[string]bool{"time": true, "measurement": true}
	for _, group := range []map[string]bool{tagKeys, fieldKeys, noteKeys} {
		for _, k := range sortedKeys(group) {
			if !seen[k] {
				seen[k] = true
				cols = append(cols, k)
			}
		}
	}
	cw := csv.NewWriter(w)
	if err := cw.Write(cols); err != nil {
		return 0, fmt.Errorf("export csv: %w", err)
	}
	n := 0
	row := make([]string, len(cols))
	err = rng(f, func(p Point) error {
		row[0] = p.Time.UTC().Format(time.RFC3339)
		row[1] = p.Measurement
		for i, k := range cols[2:] {
			row[i+2] = cell(p, k)
		}
		n++
		return cw.Write(row)
	})
	if err == nil {
		cw.Flush()
		err = cw.Error()
	}
	if err != nil {
		return n, fmt.Errorf("export csv: %w", err)
	}
	return n, nil
}

func cell(p Point, k string) string {
	if v, ok := p.Tags[k]; ok {
		return v
	}
	if v, ok := p.Fields[k]; ok {
		switch x := v.(type) {
		case float64:
			return strconv.FormatFloat(x, 'f', -1, 64)
		case int64:
			return strconv.FormatInt(x, 10)
		case bool:
			return strconv.FormatBool(x)
		case string:
			return x
		}
	}
	return p.Notes[k]
}

// ParseTime reads a time given on a command line: RFC 3339, or a UTC date
// "2006-01-02", or a UTC hour "2006-01-02T15:04".
func ParseTime(s string) (time.Time, error) {
	for _, layout := range []string{time.RFC3339Nano, "2006-01-02T15:04", "2006-01-02"} {
		if t, err := time.Parse(layout, s); err == nil {
			return t.UTC(), nil
		}
	}
	return time.Time{}, fmt.Errorf("parse time %q: want RFC 3339 (2024-07-03T10:00:00Z), 2024-07-03T10:00 (UTC) or 2024-07-03 (UTC)", s)
}

// Measurements lists the measurement names of the schema.
func Measurements() []string {
	return slices.Clone(measurements)
}

var measurements = []string{MeasurementHour, MeasurementRaw, MeasurementZone, MeasurementCommand, MeasurementReport, MeasurementAlert, MeasurementZoneAlert, MeasurementFlow}
