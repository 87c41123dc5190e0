package main

import (
	"context"
	"flag"
	"fmt"
	"io"

	"etpulse/gateway/demo"
)

var demoHelp = helpText{
	name:  "demo",
	usage: "etpulse demo [--days N] [--seed N] [--speed X] [--state FILE] [--http ADDR] [--serve]",
	intro: `Runs the real gateway against an invented farm (Tallowwood Flats: an
orchard mast with one JSON topic per sensor, a paddock station sending one
JSON object in US units, a glasshouse logger sending SenML packs) on an
embedded MQTT broker on 127.0.0.1, with duplicate, late and malformed
messages and a few sensor faults mixed in, and two irrigation zones whose
valve commands are answered by simulated controllers. Prints every closed
hour (revisions marked), zone and alert events, daily totals and a summary
on stdout. Nothing outside the process is touched; the state file is
temporary unless --state keeps it. While it runs, the farm's status pages
are served on 127.0.0.1 (address printed on stderr); --serve keeps them up
after the simulated days until Ctrl-C.`,
	outro: `Exit status: 0 success (also when interrupted), 1 the run failed, 2 bad
command line.`,
}

// runDemo is `etpulse demo`: the gateway against a simulated farm on an
// embedded broker, printing closed hours until --days have passed.
func runDemo(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("demo", flag.ContinueOnError)
	days := fs.Int("days", 1, "simulate `N` days (1-30)")
	seed := fs.Uint64("seed", 1, "seed `N` of the simulated weather and injected faults: the same seed prints the same table")
	speed := fs.Float64("speed", 0, "`X` simulated seconds per real second; 0 (the default) runs as fast as the pipeline goes")
	statePath := fs.String("state", "", "keep the state file, with its local history, at `FILE` (must not exist yet) for 'etpulse export'; default: a temporary file, removed at the end")
	httpAddr := fs.String("http", "", "serve the status pages on `ADDR` (host:port); default a free port on 127.0.0.1")
	serve := fs.Bool("serve", false, "keep serving the status pages after the simulated days, until Ctrl-C")
	logLevel := fs.String("log-level", "error", "gateway log `level` on stderr: debug, info, warn or error")
	if code, done := parseFlags(fs, args, demoHelp, stdout, stderr); done {
		return code
	}
	if fs.NArg() > 0 {
		return usageError(stderr, demoHelp, "unexpected argument %q", fs.Arg(0))
	}
	if *days < 1 || *days > 30 || *speed < 0 {
		return usageError(stderr, demoHelp, "--days must be 1-30 and --speed >= 0, got --days %d --speed %g", *days, *speed)
	}
	log, err := newLogger(stderr, "text", *logLevel)
	if err != nil {
		return usageError(stderr, demoHelp, "%v", err)
	}
	if _, err := demo.Run(ctx, demo.RunOptions{Days: *days, Seed: *seed, Speed: *speed, StatePath: *statePath, Out: stdout, Logger: log,
		StatusAddr: *httpAddr, Serve: *serve, Notes: stderr,
		Faults: demo.DriftFaults(demo.DefaultStart), Setup: demo.ShowAlerts}); err != nil {
		if ctx.Err() != nil {
			return exitOK
		}
		fmt.Fprintf(stderr, "etpulse %v\n", err) // err starts with "demo: "
		return exitError
	}
	return exitOK
}
