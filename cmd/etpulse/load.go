package main

import (
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"os"

	"etpulse/gateway/loadgen"
)

var loadHelp = helpText{
	name:  "load",
	usage: "etpulse load [--broker tcp://127.0.0.1:PORT] [--stations N] [--messages N] [--duration D] [--rate R] [--no-bare] [--cpuprofile FILE] [--memprofile FILE] [--memprofile-peak FILE] [--json]",
	intro: `Measures the gateway's throughput: runs the real gateway in process
(pipeline, state file in a temporary directory, outbox and local history,
alerts) against an MQTT broker on this machine, fed by up to 10000
simulated stations that publish at QoS 1 a reading of each sensor every
--interval of simulated time, so hours close during the run. Publishers keep
at most --window messages unacknowledged, or send at --rate. The run stops
after --messages or --duration, waits for the gateway to catch up, and
prints a summary on stdout (progress lines on stderr): throughput, CPU per
message, acknowledgement and record latency, the time to close one hour at
every station, bytes written per message, peak memory, and a consistency
verdict.

First, for at most --bare-duration, the same publishers feed a bare
subscriber on the same broker (QoS 1, the same topics, each message
acknowledged and counted, nothing else): the summary gives the gateway's
rate and CPU per message as a ratio of that floor's.

--cpuprofile, --memprofile and --memprofile-peak write profiles of the
gateway phase in the format of 'go tool pprof' (e.g. 'go tool pprof -top
FILE'): CPU from the first publication until the gateway has caught up
(publishers included, the bare phase not); the heap at the end of that
phase, after a garbage collection, while the gateway still holds its
state; and the heap while it was at its highest (sampled every 100 ms,
within 10 %), whose in-use figures are the live data of the collection
before.`,
	outro: `For mosquitto, set set_tcp_nodelay true and max_queued_messages 0.
See deploy/PERFORMANCE.md for the figures and how to reproduce them.

Exit status: 0 consistent (also when interrupted: the summary covers what
was done), 1 inconsistent result or failure, 2 bad command line.`,
}

// runLoad is `etpulse load`: the live gateway in process against a broker on
// this machine, fed simulated readings until --messages or --duration, then
// a summary of throughput, latency, hours and memory.
func runLoad(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("load", flag.ContinueOnError)
	var o loadgen.Options
	fs.StringVar(&o.BrokerURL, "broker", "", "`URL` of a broker on this machine, tcp://127.0.0.1:PORT (a host that is not a loopback address is refused); empty starts an embedded broker")
	fs.IntVar(&o.Stations, "stations", loadgen.DefaultStations, "simulate `N` stations (payload formats mixed)")
	fs.IntVar(&o.Messages, "messages", loadgen.DefaultMessages, "publish at most `N` messages (rounded down to whole rounds of readings of every sensor)")
	fs.DurationVar(&o.Duration, "duration", loadgen.DefaultDuration, "publish for at most `D` (at most 10m)")
	fs.Float64Var(&o.Rate, "rate", 0, "publish `R` messages per second in total; 0 (the default) as fast as the gateway takes them")
	fs.DurationVar(&o.Interval, "interval", loadgen.DefaultInterval, "simulated time `D` between two readings of a sensor (1s-5m)")
	fs.IntVar(&o.Publishers, "publishers", loadgen.DefaultPublishers, "publish over `N` connections")
	fs.IntVar(&o.Window, "window", loadgen.DefaultWindow, "at most `N` messages published and not yet acknowledged by the gateway")
	fs.IntVar(&o.Bad, "bad", 0, "inject `N` malformed messages (the gateway must reject exactly these)")
	fs.StringVar(&o.Dir, "dir", "", "put the run's temporary state file in `DIR` (default: the system's temporary directory)")
	fs.DurationVar(&o.Every, "every", loadgen.DefaultEvery, "a progress line on stderr every `D`; 0 for none")
	fs.DurationVar(&o.BareDuration, "bare-duration", loadgen.DefaultBare, "run the bare subscriber's phase for at most `D` (it also stops after --messages)")
	fs.BoolVar(&o.NoBare, "no-bare", false, "skip the bare subscriber's phase")
	cpuProfile := fs.String("cpuprofile", "", "write a CPU profile of the gateway phase to `FILE`")
	memProfile := fs.String("memprofile", "", "write a heap profile taken at the end of the gateway phase to `FILE`")
	peakProfile := fs.String("memprofile-peak", "", "write a heap profile taken at the gateway phase's highest heap to `FILE`")
	asJSON := fs.Bool("json", false, "print the summary as JSON")
	logLevel := fs.String("log-level", "error", "gateway log `level` on stderr: debug, info, warn or error")
	if code, done := parseFlags(fs, args, loadHelp, stdout, stderr); done {
		return code
	}
	if fs.NArg() > 0 {
		return usageError(stderr, loadHelp, "unexpected argument %q", fs.Arg(0))
	}
	log, err := newLogger(stderr, "text", *logLevel)
	if err != nil {
		return usageError(stderr, loadHelp, "%v", err)
	}
	o.Logger = log
	o.Progress = stderr
	if o.Every == 0 {
		o.Progress = nil
	}
	if err := o.Validate(); err != nil {
		return usageError(stderr, loadHelp, "%v", err)
	}
	closeProfiles, err := openProfiles(&o, *cpuProfile, *memProfile, *peakProfile)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse load: %v\n", err)
		return exitError
	}
	sum, err := loadgen.Run(ctx, o)
	if cerr := closeProfiles(); cerr != nil && err == nil {
		err = cerr
	}
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

// openProfiles creates the profile files named by --cpuprofile,
// --memprofile and --memprofile-peak (empty: none) and sets them in o. The returned function
// closes them and reports the first error.
func openProfiles(o *loadgen.Options, cpuPath, memPath, peakPath string) (func() error, error) {
	var files []*os.File
	closeAll := func() error {
		var first error
		for _, f := range files {
			if err := f.Close(); err != nil && first == nil {
				first = fmt.Errorf("close profile: %w", err)
			}
		}
		return first
	}
	for _, p := range []struct {
		flag, path string
		w          *io.Writer
	}{{"--cpuprofile", cpuPath, &o.CPUProfile}, {"--memprofile", memPath, &o.MemProfile}, {"--memprofile-peak", peakPath, &o.PeakMemProfile}} {
		if p.path == "" {
			continue
		}
		f, err := os.Create(p.path)
		if err != nil {
			_ = closeAll() // the error that matters is the create's
			return nil, fmt.Errorf("%s: %w (give a file in a writable directory)", p.flag, err)
		}
		files = append(files, f)
		*p.w = f
	}
	return closeAll, nil
}
