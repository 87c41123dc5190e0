package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/term"

	"etpulse/gateway/config"
	"etpulse/gateway/replay"
	"etpulse/gateway/zones"
)

// runReplay is `etpulse replay --config FILE --in readings.csv`: recorded
// readings through the pipeline offline, hourly records as CSV on stdout.
func runReplay(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("replay", flag.ContinueOnError)
	fs.SetOutput(stderr)
	cfgPath := fs.String("config", "", "configuration file (YAML)")
	inPath := fs.String("in", "", "readings CSV (time,station,quantity,value,unit); - for stdin")
	statePath := fs.String("state", "", "state file to keep (default: a temporary file, removed afterwards)")
	zonesPath := fs.String("zones", "", "write the zone backtest (per zone and day: ETc, rain, runs, credited, drainage, depletion) to FILE")
	summary := fs.Bool("summary", false, "print the season totals per zone to stderr")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: etpulse replay --config FILE --in readings.csv [--state FILE] [--zones FILE] [--summary] > records.csv")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return exitOK
		}
		return exitUsage
	}
	if *cfgPath == "" || *inPath == "" || fs.NArg() > 0 {
		fs.Usage()
		return exitUsage
	}
	cfg, err := config.Load(*cfgPath)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse replay: %v\n", err)
		return exitUsage
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
	opts := replay.Options{StatePath: *statePath, RowErrors: stderr}
	bt, closeBT, err := zones.OpenBacktest(cfg)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse replay: %v\n", err)
		return exitError
	}
	defer closeBT()
	if bt != nil {
		opts.Handlers = append(opts.Handlers, bt)
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
	fmt.Fprintf(stderr, "etpulse replay: %d rows (%d bad, %d duplicate), %d readings stored, %d hourly records (%d complete first records, %d revisions)\n",
		sum.Rows, sum.BadRows, sum.Duplicates, sum.Accepted, sum.Records, sum.Complete, sum.Revisions)
	if bt != nil {
		if err := bt.Report(*zonesPath, *summary, stderr); err != nil {
			fmt.Fprintf(stderr, "etpulse replay: %v\n", err)
			return exitError
		}
	}
	return exitOK
}
