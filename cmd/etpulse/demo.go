package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"

	"etpulse/gateway/demo"
)

// runDemo is `etpulse demo`: the gateway against a simulated farm on an
// embedded broker, printing closed hours until --days have passed.
func runDemo(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("demo", flag.ContinueOnError)
	fs.SetOutput(stderr)
	days := fs.Int("days", 1, "simulated days to run (1-30)")
	seed := fs.Uint64("seed", 1, "seed of the simulated weather and injected faults")
	speed := fs.Float64("speed", 0, "simulated seconds per real second; 0 runs as fast as the pipeline goes")
	logLevel := fs.String("log-level", "error", "gateway log level on stderr: debug, info, warn or error")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: etpulse demo [--days N] [--seed N] [--speed X]")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return exitOK
		}
		return exitUsage
	}
	if fs.NArg() > 0 || *days < 1 || *days > 30 || *speed < 0 {
		fmt.Fprintf(stderr, "etpulse demo: --days must be 1-30 and --speed >= 0, got --days %d --speed %g\n", *days, *speed)
		return exitUsage
	}
	log, err := newLogger(stderr, "text", *logLevel)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse demo: %v\n", err)
		return exitUsage
	}
	if _, err := demo.Run(ctx, demo.RunOptions{Days: *days, Seed: *seed, Speed: *speed, Out: stdout, Logger: log,
		Faults: demo.DriftFaults(demo.DefaultStart), Setup: demo.ShowAlerts}); err != nil {
		if ctx.Err() != nil {
			return exitOK
		}
		fmt.Fprintf(stderr, "etpulse demo: %v\n", err)
		return exitError
	}
	return exitOK
}
