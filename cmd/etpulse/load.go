package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"

	"etpulse/gateway/loadgen"
)

// runLoad is `etpulse load`: the live gateway in process against a broker on
// this machine, fed simulated readings until --messages or --duration, then
// a summary of throughput, latency, hours and memory.
func runLoad(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("load", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var o loadgen.Options
	fs.StringVar(&o.BrokerURL, "broker", "", "broker on this machine, tcp://127.0.0.1:PORT; empty starts an embedded broker")
	fs.IntVar(&o.Stations, "stations", loadgen.DefaultStations, "simulated stations (payload formats mixed)")
	fs.IntVar(&o.Messages, "messages", loadgen.DefaultMessages, "messages to publish at most")
	fs.DurationVar(&o.Duration, "duration", loadgen.DefaultDuration, "publishing time at most (at most 10m)")
	fs.Float64Var(&o.Rate, "rate", 0, "total messages per second; 0 publishes as fast as the gateway takes them")
	fs.DurationVar(&o.Interval, "interval", loadgen.DefaultInterval, "simulated time between two readings of a sensor (1s-5m)")
	fs.IntVar(&o.Publishers, "publishers", loadgen.DefaultPublishers, "publishing connections")
	fs.IntVar(&o.Window, "window", loadgen.DefaultWindow, "messages published and not yet acknowledged by the gateway, at most")
	fs.IntVar(&o.Bad, "bad", 0, "malformed messages to inject (the gateway must reject exactly these)")
	fs.StringVar(&o.Dir, "dir", "", "directory for the run's temporary state file (default: the system's temporary directory)")
	fs.DurationVar(&o.Every, "every", loadgen.DefaultEvery, "progress line interval on stderr; 0 for none")
	asJSON := fs.Bool("json", false, "print the summary as JSON")
	logLevel := fs.String("log-level", "error", "gateway log level on stderr: debug, info, warn or error")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: etpulse load [--broker tcp://127.0.0.1:PORT] [--stations N] [--messages N] [--duration D] [--rate R] [--json]")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return exitOK
		}
		return exitUsage
	}
	if fs.NArg() > 0 {
		fs.Usage()
		return exitUsage
	}
	log, err := newLogger(stderr, "text", *logLevel)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse load: %v\n", err)
		return exitUsage
	}
	o.Logger = log
	o.Progress = stderr
	if o.Every == 0 {
		o.Progress = nil
	}
	if err := o.Validate(); err != nil {
		fmt.Fprintf(stderr, "etpulse load: %v\n", err)
		return exitUsage
	}
	sum, err := loadgen.Run(ctx, o)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse load: %v\n", err)
		return exitError
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		err = enc.Encode(sum)
	} else {
		err = sum.WriteText(stdout)
	}
	if err != nil {
		fmt.Fprintf(stderr, "etpulse load: %v\n", err)
		return exitError
	}
	if sum.StoppedBy == "signal" {
		fmt.Fprintln(stderr, "etpulse load: interrupted; the summary covers what was done")
		return exitOK
	}
	if err := sum.Check(); err != nil {
		fmt.Fprintf(stderr, "etpulse load: inconsistent result: %v\n", err)
		return exitError
	}
	return exitOK
}
