package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"

	"etpulse/gateway/config"
	"etpulse/gateway/ingest"
	"etpulse/gateway/mqtt"
)

var checkHelp = helpText{
	name:  "check",
	usage: "etpulse check [--config] FILE [--quiet]",
	intro: `Validates a configuration file the way 'etpulse run' loads it (unknown
keys, ranges, units, topics, zones, alerts) and prints a summary on stdout:
broker, state file, the gateway's own topics, and per station its place,
reference, timing settings and every sensor with its topic, payload format,
quantity and unit; per zone its TAW, RAW, trigger and refill target, the
application rate and how it was derived, the minutes to apply RAW, the most
net water one window can deliver under the caps, and the peak-month crop ET
against the zone's daily capacity. Every problem found is listed on stderr,
each naming its field. Figures that are valid but implausible (available
water, rates, emitter or nozzle flows that look like another unit, a zone
that cannot keep up in the peak month) and what only the target machine has
(the broker password and TLS files, the store token) are reported as
warnings on stderr and do not change the exit status, so the check also
runs before every start of the service.`,
	outro: `Exit status: 0 valid (warnings allowed), 1 the summary could not be
written, 2 bad command line or invalid configuration.`,
}

// runCheck validates a configuration file. It prints a summary and exits 0
// when the file is valid, or prints every problem and exits 2. Things that
// can only be checked on this machine (the broker password's source, TLS
// files) are reported as warnings and do not change the exit code, so the
// command also works as a systemd ExecStartPre on a machine without them.
func runCheck(_ context.Context, args []string, _ io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("check", flag.ContinueOnError)
	path := fs.String("config", "", "configuration `file` (YAML) to validate")
	quiet := fs.Bool("quiet", false, "print nothing when the configuration is valid (warnings still go to stderr)")
	if code, done := parseConfigFlags(fs, args, checkHelp, path, stdout, stderr); done {
		return code
	}
	if fs.NArg() > 0 {
		return usageError(stderr, checkHelp, "unexpected argument %q", fs.Arg(0))
	}
	if *path == "" {
		return usageError(stderr, checkHelp, configForms)
	}

	cfg, err := config.Load(*path)
	if err != nil {
		var ve *config.ValidationError
		if errors.As(err, &ve) {
			fmt.Fprintf(stderr, "%s%s: %d problem(s):\n", *path, configOrigin(*path), len(ve.Problems))
			for _, p := range ve.Problems {
				fmt.Fprintf(stderr, "  %s\n", p)
			}
		} else {
			fmt.Fprintf(stderr, "%s%s: %v\n", *path, configOrigin(*path), err)
		}
		return exitUsage
	}
	if _, err := ingest.NewRouter(cfg); err != nil {
		fmt.Fprintf(stderr, "%s: %v\n", *path, err)
		return exitUsage
	}
	if !*quiet {
		fmt.Fprintf(stdout, "%s: configuration is valid\n\n", *path)
		if err := cfg.Summary(stdout); err != nil {
			fmt.Fprintf(stderr, "etpulse check: %v\n", err)
			return exitError
		}
	}
	for _, w := range cfg.Warnings() {
		fmt.Fprintf(stderr, "warning: %s\n", w)
	}
	for _, err := range machineLocalProblems(cfg) {
		fmt.Fprintf(stderr, "warning: %v (needed by 'etpulse run' on this machine)\n", err)
	}
	return exitOK
}

// machineLocalProblems reads what only this machine has: the broker password
// and TLS files, and the store token. Each is checked on its own, so a
// missing password file does not hide a missing CA file.
func machineLocalProblems(cfg *config.Config) []error {
	var errs []error
	if _, err := mqtt.OptionsFromConfig(cfg.Broker); err != nil {
		errs = append(errs, err)
		if _, perr := cfg.Broker.Password.Resolve(); perr != nil {
			b := cfg.Broker
			b.Password = config.Secret{}
			if _, err := mqtt.OptionsFromConfig(b); err != nil {
				errs = append(errs, err)
			}
		}
	}
	if cfg.Store.URL != "" && cfg.Store.Token.IsSet() {
		if _, err := cfg.Store.Token.Resolve(); err != nil {
			errs = append(errs, fmt.Errorf("store token: %w", err))
		}
	}
	return errs
}
