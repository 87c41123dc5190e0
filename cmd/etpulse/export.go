package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"strings"

	"etpulse/gateway"
	"etpulse/gateway/config"
	"etpulse/gateway/httpapi"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
)

var exportHelp = helpText{
	name:  "export",
	usage: "etpulse export --from TIME --to TIME [--station STATION] [--measurement LIST] [--format csv|lp] (--state FILE | CONFIG | --config FILE)",
	intro: `Prints the local history kept in a state file (hourly records, zone
steps, valve commands and reports, alerts; raw summaries are not kept) on
stdout, and the number of points on stderr. Times: RFC 3339, or UTC
2006-01-02 / 2006-01-02T15:04; a point's time is the start of its period.

With --config the history is read through the running gateway's HTTP
listener (http.listen, GET /api/v1/history) while it runs and writes; when
no gateway answers there, from the state file (state.path). stderr says
which. --state reads the file only, so the gateway must be stopped (or give
a copy). 'etpulse demo --state FILE' keeps a demo's state for this.`,
	outro: `CSV: one row per point; columns time (UTC), measurement, then every tag,
field and note key found (tags first), empty where a point has no such key.
lp: the line protocol the store writer sends, nanosecond times.

Exit status: 0 success, 1 the history cannot be read (gateway error, state
file missing or locked, no local history), 2 bad command line or
configuration.`,
}

// runExport prints the local history: through the running gateway when
// --config names one that answers, else from the state file.
func runExport(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("export", flag.ContinueOnError)
	fs.String("from", "", "first point `time` to print (inclusive)")
	fs.String("to", "", "end `time` of the period (exclusive)")
	fs.String("station", "", "only points of this `station` id")
	fs.String("measurement", "", "only the measurements in this comma-separated `list`: "+strings.Join(store.Measurements(), ", "))
	fs.String("format", "csv", "output `format`: csv, or lp for InfluxDB line protocol (post it with precision=ns)")
	statePath := fs.String("state", "", "state `file` to read (the gateway must not be running)")
	configPath := fs.String("config", "", "configuration `file`: read through the running gateway on its http.listen, else its state.path")
	if code, done := parseConfigFlags(fs, args, exportHelp, configPath, stdout, stderr); done {
		return code
	}
	usageErr := func(format string, a ...any) int {
		return usageError(stderr, exportHelp, format, a...)
	}
	if fs.NArg() > 0 {
		return usageErr("unexpected argument %q", fs.Arg(0))
	}
	if *statePath != "" && configOrigin(*configPath) != "" {
		*configPath = "" // --state overrides ETPULSE_CONFIG
	}
	q, err := httpapi.ParseHistoryQuery(func(name string) string { return fs.Lookup(name).Value.String() })
	if err != nil {
		var pe *httpapi.ParamError
		if errors.As(err, &pe) {
			return usageErr("--%s: %s", pe.Param, pe.Problem)
		}
		return usageErr("%v", err)
	}
	path := *statePath
	switch {
	case path != "" && *configPath != "":
		return usageErr("give --state or --config, not both")
	case *configPath != "":
		cfg, err := config.Load(*configPath)
		if err != nil {
			fmt.Fprintf(stderr, "etpulse export: %v%s\n", err, configOrigin(*configPath))
			return exitUsage
		}
		path = cfg.State.Path
		if cfg.HTTP.Disabled {
			fmt.Fprintf(stderr, "etpulse export: http.disabled is set: reading the state file %s\n", path)
			break
		}
		base, err := httpapi.BaseURL(cfg.HTTP.Listen)
		if err != nil {
			fmt.Fprintf(stderr, "etpulse export: %v\n", err)
			return exitUsage
		}
		token, err := gateway.ReadToken(cfg.HTTP)
		if err != nil {
			fmt.Fprintf(stderr, "etpulse export: %v\n", err)
			return exitUsage
		}
		n, err := httpapi.FetchHistory(ctx, base, q, token, stdout)
		switch {
		case err == nil:
			fmt.Fprintf(stderr, "etpulse export: %s, read through the running gateway at %s\n", count(n, "point", "points"), base)
			return exitOK
		case errors.Is(err, httpapi.ErrNoGateway):
			fmt.Fprintf(stderr, "etpulse export: no gateway answers at %s: reading the state file %s\n", base, path)
		default:
			fmt.Fprintf(stderr, "etpulse export: %v\n", err)
			return exitError
		}
	case path == "":
		return usageErr("give --state FILE, or the configuration as the first argument, --config FILE or %s", configEnv)
	}
	return exportFile(path, q, stdout, stderr)
}

// exportFile prints the history of the state file at path, which no
// running gateway may hold.
func exportFile(path string, q httpapi.HistoryQuery, stdout, stderr io.Writer) int {
	db, err := state.OpenReadOnly(path)
	if err != nil {
		if errors.Is(err, state.ErrLocked) {
			fmt.Fprintf(stderr, "etpulse export: state file %s is in use by a running gateway; export through it with --config FILE (http.listen must be on), or stop it, or export from a copy\n", path)
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
	n, err := httpapi.WriteHistory(stdout, h, q)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse export: %v\n", err)
		return exitError
	}
	fmt.Fprintf(stderr, "etpulse export: %s\n", count(n, "point", "points"))
	return exitOK
}
