package report

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"
)

// Formats are the output formats of Write.
var Formats = []string{"text", "csv", "json"}

// Write prints r in format (text, csv or json).
func Write(w io.Writer, r Report, format string) error {
	switch format {
	case "text", "":
		return writeText(w, r)
	case "csv":
		return writeCSV(w, r)
	case "json":
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		if err := enc.Encode(r); err != nil {
			return fmt.Errorf("write report json: %w", err)
		}
		return nil
	}
	return &InputError{"format", fmt.Sprintf("must be one of %s, got %q", strings.Join(Formats, ", "), format)}
}

// offsetOf returns the UTC offset of a zone's station in r.
func (r Report) offsetOf(station string) float64 {
	for _, s := range r.Stations {
		if s.Station == station {
			return s.UTCOffsetHours
		}
	}
	return 0
}

// local formats t in a station's standard time, with its offset.
func local(t time.Time, offsetHours float64) string {
	return t.In(fixed(offsetHours)).Format("2006-01-02 15:04 -07:00")
}

func optMM(v *float64) string {
	if v == nil {
		return "-"
	}
	return strconv.FormatFloat(*v, 'f', 1, 64)
}

func etText(ets []ET) string {
	if len(ets) == 0 {
		return "-"
	}
	parts := make([]string, len(ets))
	for i, e := range ets {
		parts[i] = fmt.Sprintf("%s %.2f mm", e.Label, e.MM)
	}
	return strings.Join(parts, ", ")
}

func writeText(w io.Writer, r Report) error {
	ew := &errWriter{w: w}
	fmt.Fprintf(ew, "Morning report: site %s, %s (standard time of each station)\n\n", r.Site, r.Date)
	tw := tabwriter.NewWriter(ew, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "station\treference ET\train mm\thours complete/filled/missing\talerts")
	for _, s := range r.Stations {
		fmt.Fprintf(tw, "%s\t%s\t%.2f\t%d/%d/%d\t%d\n", s.Station, etText(s.ET), s.RainMM, s.HoursComplete, s.HoursFilled, s.HoursMissing, len(s.Alerts))
	}
	tw.Flush()
	for _, s := range r.Stations {
		for _, a := range s.Alerts {
			fmt.Fprintf(ew, "  %s %s: %s %s %s (%s) %s\n", s.Station, local(a.Time, s.UTCOffsetHours), a.Sensor, a.Quantity, a.Kind, a.Severity, a.Message)
		}
	}
	if len(r.Zones) > 0 {
		fmt.Fprintln(ew)
		tw = tabwriter.NewWriter(ew, 2, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "zone\tETc mm\teff. rain mm\tcommanded min\treported min\treported L\tcredited mm\tdepletion start -> end mm\tRAW/TAW mm\tstress h")
		for _, z := range r.Zones {
			fmt.Fprintf(tw, "%s\t%.2f\t%.2f\t%.0f (%d)\t%.1f\t%.0f\t%.2f\t%s -> %s\t%s/%s\t%d\n", z.Zone, z.ETcMM, z.EffRainMM,
				z.CommandedMin, z.Commands, z.ReportedMin, z.ReportedVolumeL, z.CreditedMM,
				optMM(z.DepletionStartMM), optMM(z.DepletionEndMM), optMM(z.RAWMM), optMM(z.TAWMM), z.StressHours)
		}
		tw.Flush()
		writeDeficits(ew, r.Zones)
		fmt.Fprintln(ew, "\nNext planned runs:")
		planned := false
		for _, z := range r.Zones {
			for _, a := range z.Alerts {
				fmt.Fprintf(ew, "  %s alert %s: %s (%s) %s\n", z.Zone, local(a.Time, r.offsetOf(z.Station)), a.Kind, a.Severity, a.Message)
			}
			for _, p := range z.Plan {
				planned = true
				fmt.Fprintf(ew, "  %s  %s  %d min  cycle %d/%d  %s\n", z.Zone, local(p.Start, r.offsetOf(z.Station)), p.Minutes, p.Cycle, p.Cycles, p.State)
			}
		}
		if !planned {
			fmt.Fprintln(ew, "  none: no zone has a run planned or open")
		}
	}
	return ew.err
}

// csvHeader is the header of the CSV form: one row per figure.
var csvHeader = []string{"site", "date", "section", "id", "figure", "value"}

func writeCSV(w io.Writer, r Report) error {
	cw := csv.NewWriter(w)
	rows := [][]string{csvHeader}
	add := func(section, id, figure, value string) {
		rows = append(rows, []string{r.Site, r.Date, section, id, figure, value})
	}
	f := func(v float64) string { return strconv.FormatFloat(v, 'f', -1, 64) }
	for _, s := range r.Stations {
		for _, e := range s.ET {
			add("station", s.Station, e.Label+"_mm", f(e.MM))
		}
		add("station", s.Station, "rain_mm", f(s.RainMM))
		add("station", s.Station, "hours_complete", strconv.Itoa(s.HoursComplete))
		add("station", s.Station, "hours_filled", strconv.Itoa(s.HoursFilled))
		add("station", s.Station, "hours_missing", strconv.Itoa(s.HoursMissing))
		add("station", s.Station, "alerts", strconv.Itoa(len(s.Alerts)))
	}
	opt := func(v *float64) string {
		if v == nil {
			return ""
		}
		return f(*v)
	}
	for _, z := range r.Zones {
		for _, kv := range [][2]string{
			{"etc_mm", f(z.ETcMM)}, {"eff_rain_mm", f(z.EffRainMM)}, {"commands", strconv.Itoa(z.Commands)},
			{"commanded_minutes", f(z.CommandedMin)}, {"reported_minutes", f(z.ReportedMin)},
			{"reported_volume_l", f(z.ReportedVolumeL)}, {"credit_mm", f(z.CreditedMM)},
			{"depletion_start_mm", opt(z.DepletionStartMM)}, {"depletion_end_mm", opt(z.DepletionEndMM)},
			{"raw_mm", opt(z.RAWMM)}, {"taw_mm", opt(z.TAWMM)}, {"stress_hours", strconv.Itoa(z.StressHours)},
		} {
			add("zone", z.Zone, kv[0], kv[1])
		}
		if z.Stage != "" || (z.Deficit != nil && *z.Deficit > 0) {
			for _, kv := range [][2]string{{"deficit", opt(z.Deficit)}, {"stage", z.Stage}, {"intended_deficit", opt(z.IntendedDeficit)},
				{"intended_stress_hours", strconv.Itoa(z.IntendedStressHours)}} {
				add("zone", z.Zone, kv[0], kv[1])
			}
		}
		for _, p := range z.Plan {
			add("plan", z.Zone, p.ID, fmt.Sprintf("%s %d min cycle %d/%d %s", p.Start.Format(time.RFC3339), p.Minutes, p.Cycle, p.Cycles, p.State))
		}
	}
	if err := cw.WriteAll(rows); err != nil {
		return fmt.Errorf("write report csv: %w", err)
	}
	return nil
}

// errWriter keeps the first write error.
type errWriter struct {
	w   io.Writer
	err error
}

func (e *errWriter) Write(p []byte) (int, error) {
	if e.err != nil {
		return 0, e.err
	}
	n, err := e.w.Write(p)
	e.err = err
	return n, err
}

// writeDeficits prints, for zones short of their unstressed crop ET or in
// a deficit stage, the deficit against the intended one.
func writeDeficits(ew *errWriter, zones []Zone) {
	head := false
	for _, z := range zones {
		if z.Stage == "" && (z.Deficit == nil || *z.Deficit == 0) {
			continue
		}
		if !head {
			fmt.Fprintln(ew, "\nDeficit (1 - ETc / unstressed Kc ETo) against the intended one:")
			head = true
		}
		got := "n/a"
		if z.Deficit != nil {
			got = fmt.Sprintf("%.0f %%", *z.Deficit*100)
		}
		switch {
		case z.Stage == "":
			fmt.Fprintf(ew, "  %s  deficit %s, intended none: unintended stress %d h\n", z.Zone, got, z.StressHours)
		case z.IntendedDeficit != nil:
			fmt.Fprintf(ew, "  %s  deficit %s, intended %.0f %% (stage %s); stress %d h, all intended\n", z.Zone, got, *z.IntendedDeficit*100, z.Stage, z.StressHours)
		default:
			fmt.Fprintf(ew, "  %s  deficit %s in stage %s (a raised depletion allowance, no set share); stress %d h, all intended\n", z.Zone, got, z.Stage, z.StressHours)
		}
	}
}
