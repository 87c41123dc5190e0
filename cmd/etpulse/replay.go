package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"sort"
	"strings"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/term"

	"etpulse/gateway/config"
	"etpulse/gateway/ingest"
	"etpulse/gateway/replay"
	"etpulse/gateway/zones"
)

var replayHelp = helpText{
	name:  "replay",
	usage: "etpulse replay [--config] FILE --in readings.csv [--state FILE] [--zones FILE] [--summary] > records.csv",
	intro: `Runs recorded readings through the same pipeline, sensor checks and quality
gate as 'etpulse run', offline (no broker, nothing published), and writes
one CSV row per hourly record on stdout, revisions as extra rows; an hour
the live gateway would fill or stop because of an alerted sensor is filled
or stopped here too. The configuration's zones are run too, with every valve
reporting a normal run, as a backtest. A bad input row is reported on
stderr with its line number and skipped; a progress bar goes to stderr when
it is a terminal.`,
	outro: `Readings CSV: a header row naming the columns, in any order:
  time      RFC 3339 timestamp of the reading
  station   station id (site/station when ids repeat across sites)
  quantity  air_temp, rel_humidity, dew_point, vapour_pressure, wind, solar,
            rain (an increment), net_rad, soil_heat
  value     decimal number
  unit      a unit of the quantity, as in the configuration (degC, %, kPa,
            m/s, W/m2, mm, ...)
  sensor    optional: the sensor's name as the gateway gives it (id, or
            id.key); default the station's first sensor of the quantity

Rows for the zone backtest, in the same file, in time order:
  probe     a station reading of soil_water (%, m3/m3) or soil_tension
            (kPa, cbar, hPa) whose sensor column names a zone's probe
  meter     station = the meter's id (site/id when ids repeat), quantity
            meter_flow (L/min, m3/h), meter_total (a running volume: L, m3)
            or meter_pulses (pulses, with the meter's litres_per_pulse)
  forecast  station = the site, quantity forecast, value = the forecast
            topic's JSON payload (quoted, inner quotes doubled), unit
            empty; time = when it arrived

Output columns: site, station, reference, start_utc, end_utc, local_start,
revision, complete, air_temp_c, ea_kpa, wind_2m_m_s, solar_mj_m2, rain_mm,
ra_mj_m2, rso_mj_m2, rn_mj_m2, g_mj_m2, fcd, fcd_source, et_mm, flags, fill.
The inputs of an incomplete hour are empty.

Exit status: 0 success (bad rows skipped), 1 the run failed, 2 bad command
line, unreadable configuration or input file.`,
}

// runReplay is `etpulse replay --config FILE --in readings.csv`: recorded
// readings through the pipeline offline, hourly records as CSV on stdout.
func runReplay(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("replay", flag.ContinueOnError)
	cfgPath := fs.String("config", "", "configuration `file` (YAML): stations, sensors' units and zones")
	inPath := fs.String("in", "", "readings CSV `file` (time,station,quantity,value,unit); - for stdin")
	statePath := fs.String("state", "", "keep the pipeline's state file at `FILE` (hour bins and carries; the zone backtest and a local history are not in it); default: a temporary file, removed afterwards")
	zonesPath := fs.String("zones", "", "write the zone backtest to `FILE`: one row per zone and day (ETc, rain, runs, credited, drainage, depletion)")
	summary := fs.Bool("summary", false, "print the season totals per zone on stderr")
	if code, done := parseConfigFlags(fs, args, replayHelp, cfgPath, stdout, stderr); done {
		return code
	}
	if fs.NArg() > 0 {
		return usageError(stderr, replayHelp, "unexpected argument %q", fs.Arg(0))
	}
	if *cfgPath == "" {
		return usageError(stderr, replayHelp, configForms)
	}
	if *inPath == "" {
		return usageError(stderr, replayHelp, "--in FILE is required")
	}
	cfg, err := config.Load(*cfgPath)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse replay: %v%s\n", err, configOrigin(*cfgPath))
		return exitUsage
	}
	for _, w := range cfg.Warnings() {
		fmt.Fprintf(stderr, "etpulse replay: warning: %s\n", w)
	}
	in, size := stdin, int64(-1)
	if *inPath != "-" {
		f, err := os.Open(*inPath)
		if err != nil {
			fmt.Fprintf(stderr, "etpulse replay: %v\n", err)
			return exitUsage
		}
		defer f.Close()
		if fi, err := f.Stat(); err == nil {
			size = fi.Size()
		}
		in = f
	}
	// Rejected readings are logged by the pipeline at a bounded rate.
	log, err := newLogger(stderr, "text", "warn")
	if err != nil {
		fmt.Fprintf(stderr, "etpulse replay: %v\n", err)
		return exitError
	}
	opts := replay.Options{StatePath: *statePath, RowErrors: stderr, Logger: log}
	bt, closeBT, err := zones.OpenBacktest(cfg)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse replay: %v\n", err)
		return exitError
	}
	defer closeBT()
	if bt != nil {
		opts.Handlers = append(opts.Handlers, bt)
		opts.Zones = bt
	}
	if f, ok := stderr.(*os.File); ok && term.IsTerminal(int(f.Fd())) {
		bar := progressbar.DefaultBytes(size, "replaying")
		opts.Progress = func(n int64) { _ = bar.Set64(n) }
		defer func() { _ = bar.Finish() }()
	}
	sum, err := replay.Run(ctx, cfg, in, stdout, opts)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse replay: %v\n", err)
		return exitError
	}
	fmt.Fprintf(stderr, "etpulse replay: %s (%d bad, %d duplicate), %s stored, %s (%s, %s)%s\n",
		count(sum.Rows, "row", "rows"), sum.BadRows, sum.Duplicates, count(sum.Accepted, "reading", "readings"),
		count(sum.Records, "hourly record", "hourly records"), count(sum.Complete, "complete first record", "complete first records"),
		count(sum.Revisions, "revision", "revisions"), rejectedText(sum.Rejected))
	if bt != nil {
		if err := bt.Report(*zonesPath, *summary, stderr); err != nil {
			fmt.Fprintf(stderr, "etpulse replay: %v\n", err)
			return exitError
		}
	}
	return exitOK
}

// rejectedText is "; N readings rejected (reason n, ...)" for the readings
// the pipeline refused, or "" when there were none.
func rejectedText(rejected map[ingest.Reason]int) string {
	total := 0
	reasons := make([]string, 0, len(rejected))
	for r, n := range rejected {
		total += n
		reasons = append(reasons, fmt.Sprintf("%s %d", r, n))
	}
	if total == 0 {
		return ""
	}
	sort.Strings(reasons)
	return fmt.Sprintf("; %s rejected (%s)", count(total, "reading", "readings"), strings.Join(reasons, ", "))
}
