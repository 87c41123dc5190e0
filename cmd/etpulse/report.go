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

	"etpulse/gateway"
	"etpulse/gateway/config"
	"etpulse/gateway/httpapi"
	"etpulse/gateway/report"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
	"etpulse/gateway/zones"
)

var reportHelp = helpText{
	name:  "report",
	usage: "etpulse report (CONFIG | --config FILE) [--date YYYY-MM-DD] [--site SITE] [--format text|csv|json]",
	intro: `Prints the morning report of a site for one day (each station's standard-
time day; default yesterday): per station the day's reference ET, rain,
hours complete, filled and missing, and the alerts raised; per zone ETc,
effective rain, water commanded and reported, depletion at the start and
end of the day, RAW and TAW, hours under water stress (Ks < 1), and the
runs planned or open now.

The report is read through the running gateway's HTTP listener
(http.listen, GET /api/v1/report) while it runs; when no gateway answers
there, from the state file (state.path), opened read-only. stderr says
which.`,
	outro: `csv: one row per figure (site, date, section, id, figure, value). json:
the same document the route GET /api/v1/report returns.

Exit status: 0 success, 1 the report cannot be read (gateway error, state
file missing or locked), 2 bad command line or configuration.`,
}

// runReport prints the morning report: through the running gateway when
// one answers on the configuration's listener, else from its state file.
func runReport(ctx context.Context, args []string, _ io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("report", flag.ContinueOnError)
	configPath := fs.String("config", "", "configuration `file`: read through the running gateway on its http.listen, else its state.path")
	date := fs.String("date", "", "the `day` to report, YYYY-MM-DD (default yesterday)")
	site := fs.String("site", "", "the `site` id (default the only site)")
	format := fs.String("format", "text", "output `format`: "+strings.Join(report.Formats, ", "))
	if code, done := parseConfigFlags(fs, args, reportHelp, configPath, stdout, stderr); done {
		return code
	}
	usageErr := func(format string, a ...any) int { return usageError(stderr, reportHelp, format, a...) }
	switch {
	case fs.NArg() > 0:
		return usageErr("unexpected argument %q", fs.Arg(0))
	case *configPath == "":
		return usageErr("%s", configForms)
	case !slices.Contains(report.Formats, *format):
		return usageErr("--format: must be one of %s, got %q", strings.Join(report.Formats, ", "), *format)
	}
	if *date != "" {
		if _, err := time.Parse(time.DateOnly, *date); err != nil {
			return usageErr("--date: %q is not a date; give YYYY-MM-DD, e.g. 2024-07-14", *date)
		}
	}
	cfg, err := config.Load(*configPath)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse report: %v%s\n", err, configOrigin(*configPath))
		return exitUsage
	}
	rep, code := fetchReport(ctx, cfg, *site, *date, stderr)
	if code < 0 {
		rep, code = reportFromFile(cfg, *site, *date, stderr)
	}
	if code != exitOK {
		return code
	}
	if err := report.Write(stdout, rep, *format); err != nil {
		fmt.Fprintf(stderr, "etpulse report: %v\n", err)
		return exitError
	}
	return exitOK
}

// fetchReport asks the running gateway; code -1 means none answered.
func fetchReport(ctx context.Context, cfg *config.Config, site, date string, stderr io.Writer) (report.Report, int) {
	if cfg.HTTP.Disabled {
		fmt.Fprintf(stderr, "etpulse report: http.disabled is set: reading the state file %s\n", cfg.State.Path)
		return report.Report{}, -1
	}
	base, err := httpapi.BaseURL(cfg.HTTP.Listen)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse report: %v\n", err)
		return report.Report{}, exitUsage
	}
	token, err := gateway.ReadToken(cfg.HTTP)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse report: %v\n", err)
		return report.Report{}, exitUsage
	}
	rep, err := httpapi.FetchReport(ctx, base, site, date, token)
	var ie *report.InputError
	switch {
	case err == nil:
		fmt.Fprintf(stderr, "etpulse report: read through the running gateway at %s\n", base)
		return rep, exitOK
	case errors.As(err, &ie):
		return rep, usageError(stderr, reportHelp, "--%s: %s", ie.Param, ie.Problem)
	case errors.Is(err, httpapi.ErrNoGateway):
		fmt.Fprintf(stderr, "etpulse report: no gateway answers at %s: reading the state file %s\n", base, cfg.State.Path)
		return rep, -1
	}
	fmt.Fprintf(stderr, "etpulse report: %v\n", err)
	return rep, exitError
}

// reportFromFile builds the report from the state file, which no running
// gateway may hold.
func reportFromFile(cfg *config.Config, site, date string, stderr io.Writer) (report.Report, int) {
	path := cfg.State.Path
	db, err := state.OpenReadOnly(path)
	if err != nil {
		if errors.Is(err, state.ErrLocked) {
			fmt.Fprintf(stderr, "etpulse report: state file %s is in use by a running gateway whose http listener does not answer; turn http on (http.listen) or stop it\n", path)
		} else {
			fmt.Fprintf(stderr, "etpulse report: open state %s: %v\n", path, err)
		}
		return report.Report{}, exitError
	}
	defer db.Close()
	h, err := store.OpenHistory(db)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse report: %s: %v\n", path, err)
		return report.Report{}, exitError
	}
	src := report.Sources{Config: cfg, History: h, Now: time.Now}
	if hasZones(cfg) {
		zs, err := zones.New(zones.Options{Config: cfg, DB: db})
		if err != nil {
			fmt.Fprintf(stderr, "etpulse report: %s: %v\n", path, err)
			return report.Report{}, exitError
		}
		src.Zones = zs
	}
	b, err := report.New(src)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse report: %v\n", err)
		return report.Report{}, exitError
	}
	rep, err := b.Report(site, date)
	var ie *report.InputError
	switch {
	case errors.As(err, &ie):
		return rep, usageError(stderr, reportHelp, "--%s: %s", ie.Param, ie.Problem)
	case err != nil:
		fmt.Fprintf(stderr, "etpulse report: %v\n", err)
		return rep, exitError
	}
	return rep, exitOK
}

func hasZones(cfg *config.Config) bool {
	for i := range cfg.Sites {
		if len(cfg.Sites[i].Zones) > 0 {
			return true
		}
	}
	return false
}
