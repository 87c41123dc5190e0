package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"slices"
	"strings"
	"time"

	"go.etcd.io/bbolt"
	bberrors "go.etcd.io/bbolt/errors"

	"etpulse/gateway/config"
	"etpulse/gateway/store"
)

var exportHelp = helpText{
	name:  "export",
	usage: "etpulse export --from TIME --to TIME [--station STATION] [--measurement LIST] [--format csv|lp] (--state FILE | --config FILE)",
	intro: `Prints the local history kept in a state file (hourly records, zone
steps, valve commands and reports, alerts; raw summaries are not kept) on
stdout, and the number of points on stderr. Times: RFC 3339, or UTC
2006-01-02 / 2006-01-02T15:04; a point's time is the start of its period.
The state file must not be open in a running gateway: stop it, or export
from a copy. 'etpulse demo --state FILE' keeps a demo's state for this.`,
	outro: `CSV: one row per point; columns time (UTC), measurement, then every tag,
field and note key found (tags first), empty where a point has no such key.
lp: the line protocol the store writer sends, nanosecond times.

Exit status: 0 success, 1 the state file cannot be read (missing, locked,
no local history), 2 bad command line or configuration.`,
}

// runExport prints the local history kept in the state file.
func runExport(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("export", flag.ContinueOnError)
	from := fs.String("from", "", "first point `time` to print (inclusive)")
	to := fs.String("to", "", "end `time` of the period (exclusive)")
	station := fs.String("station", "", "only points of this `station` id")
	meas := fs.String("measurement", "", "only the measurements in this comma-separated `list`: "+strings.Join(store.Measurements(), ", "))
	format := fs.String("format", "csv", "output `format`: csv, or lp for InfluxDB line protocol (post it with precision=ns)")
	statePath := fs.String("state", "", "state `file` to read")
	configPath := fs.String("config", "", "configuration `file`: read its state.path")
	if code, done := parseFlags(fs, args, exportHelp, stdout, stderr); done {
		return code
	}
	usageErr := func(format string, a ...any) int {
		return usageError(stderr, exportHelp, format, a...)
	}
	if fs.NArg() > 0 {
		return usageErr("unexpected argument %q", fs.Arg(0))
	}
	var f store.Filter
	var err error
	if *from == "" || *to == "" {
		return usageErr("--from and --to are required")
	}
	if f.From, err = store.ParseTime(*from); err != nil {
		return usageErr("--from: %v", err)
	}
	if f.To, err = store.ParseTime(*to); err != nil {
		return usageErr("--to: %v", err)
	}
	if !f.To.After(f.From) {
		return usageErr("--to %s must be after --from %s", f.To.Format(time.RFC3339), f.From.Format(time.RFC3339))
	}
	f.Station = *station
	if *meas != "" {
		for _, m := range strings.Split(*meas, ",") {
			if !slices.Contains(store.Measurements(), m) {
				return usageErr("--measurement: unknown measurement %q (known: %s)", m, strings.Join(store.Measurements(), ", "))
			}
			f.Measurements = append(f.Measurements, m)
		}
	}
	if *format != "csv" && *format != "lp" {
		return usageErr("--format must be csv or lp, got %q", *format)
	}
	path := *statePath
	switch {
	case path != "" && *configPath != "":
		return usageErr("give --state or --config, not both")
	case *configPath != "":
		cfg, err := config.Load(*configPath)
		if err != nil {
			fmt.Fprintf(stderr, "etpulse export: %v\n", err)
			return exitUsage
		}
		path = cfg.State.Path
	case path == "":
		return usageErr("--state FILE or --config FILE is required")
	}

	db, err := bbolt.Open(path, 0o600, &bbolt.Options{ReadOnly: true, Timeout: 2 * time.Second})
	if err != nil {
		if errors.Is(err, bberrors.ErrTimeout) {
			fmt.Fprintf(stderr, "etpulse export: state file %s is in use by a running gateway; stop it or export from a copy\n", path)
		} else {
			fmt.Fprintf(stderr, "etpulse export: open state %s: %v\n", path, err)
		}
		return exitError
	}
	defer db.Close()
	h, err := store.OpenHistory(db)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse export: %s: %v\n", path, err)
		return exitError
	}
	var n int
	if *format == "lp" {
		n, err = store.ExportLineProtocol(stdout, h, f)
	} else {
		n, err = store.ExportCSV(stdout, h, f)
	}
	if err != nil {
		fmt.Fprintf(stderr, "etpulse export: %v\n", err)
		return exitError
	}
	fmt.Fprintf(stderr, "etpulse export: %s\n", count(n, "point", "points"))
	return exitOK
}
