package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"

	"etpulse/gateway/config"
	"etpulse/gateway/state"
)

var compactHelp = helpText{
	name:  "compact",
	usage: "etpulse compact (CONFIG | --config FILE | --state FILE)",
	intro: `Returns the space of deleted rows (history past its retention, pruned
hours, sent outbox points) to the file system: the state file (state.path
of the configuration, or --state) is copied onto as few pages as its rows
need, the copy is checked (it opens as a state file of this version with
the same number of keys in every bucket), the original is kept as
<file>.precompact.bak and the copy is renamed in its place. The next start
of the gateway removes the backup.

The gateway must be stopped: a state file held by a running gateway is
refused and left as it is. The compaction needs free disk space for the
copy (at most the in-use bytes it prints).`,
	outro: `Exit status: 0 compacted, 1 the file cannot be compacted (held by a
running gateway, missing, not a state file of this version, disk full),
2 bad command line or configuration.`,
}

// runCompact compacts a stopped gateway's state file.
func runCompact(_ context.Context, args []string, _ io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("compact", flag.ContinueOnError)
	statePath := fs.String("state", "", "state `file` to compact (the gateway must be stopped)")
	configPath := fs.String("config", "", "configuration `file` whose state.path to compact")
	if code, done := parseConfigFlags(fs, args, compactHelp, configPath, stdout, stderr); done {
		return code
	}
	if fs.NArg() > 0 {
		return usageError(stderr, compactHelp, "unexpected argument %q", fs.Arg(0))
	}
	if *statePath != "" && configOrigin(*configPath) != "" {
		*configPath = "" // --state overrides ETPULSE_CONFIG
	}
	path := *statePath
	switch {
	case path != "" && *configPath != "":
		return usageError(stderr, compactHelp, "give --state or --config, not both")
	case *configPath != "":
		cfg, err := config.Load(*configPath)
		if err != nil {
			fmt.Fprintf(stderr, "etpulse compact: %v%s\n", err, configOrigin(*configPath))
			return exitUsage
		}
		path = cfg.State.Path
	case path == "":
		return usageError(stderr, compactHelp, "give --state FILE, or %s", configForms)
	}
	res, err := state.Compact(path, nil)
	switch {
	case errors.Is(err, state.ErrLocked):
		fmt.Fprintf(stderr, "etpulse compact: state file %s is in use by a running gateway: stop the gateway, then compact; the file is unchanged\n", path)
		return exitError
	case err != nil:
		fmt.Fprintf(stderr, "etpulse compact: %v\n", err)
		return exitError
	}
	fmt.Fprintf(stdout, "%s: %s on disk before (%s in use), %s after (%s in use); original kept as %s\n",
		path, mib(res.Before.FileBytes), mib(res.Before.InUseBytes()),
		mib(res.After.FileBytes), mib(res.After.InUseBytes()), res.Backup)
	return exitOK
}

// mib formats a byte count in MiB with two decimals.
func mib(n int64) string { return fmt.Sprintf("%.2f MiB", float64(n)/(1<<20)) }
