// Command etpulse is the farm gateway: hourly reference ET from live weather
// sensors, zone water balance and valve commands. See README.md.
package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
)

func main() { os.Exit(run(context.Background(), os.Args[1:], os.Stdin, os.Stdout, os.Stderr)) }

// Exit codes, decided here and nowhere else.
const (
	exitOK    = 0
	exitError = 1 // the command ran and failed
	exitUsage = 2 // bad command line or configuration
)

// command is one sub-command. Run returns an exit code.
type command struct {
	name    string
	summary string
	run     func(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int
}

func commands() []command {
	return []command{
		{"demo", "run the gateway against a simulated farm on an embedded broker", runDemo},
		{"run", "run the gateway daemon (--config FILE)", runDaemon},
		{"check", "validate a configuration file and print a summary", runCheck},
		{"calc", "compute hourly reference ET from an hourly weather CSV", runCalc},
		{"replay", "run recorded readings through the pipeline offline", runReplay},
		{"export", "print the local history as CSV or line protocol", runExport},
		{"compact", "return a stopped gateway's unused state file space to the disk", runCompact},
		{"report", "print the morning report of a site for one day", runReport},
		{"water", "record water the gateway did not command, or a measured depletion", runWater},
		{"load", "measure the gateway's throughput with simulated stations on a local broker", runLoad},
		{"version", "print the version, revision and Go version", runVersion},
	}
}

func run(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	switch {
	case len(args) > 0 && (args[0] == "--version" || args[0] == "-version"):
		args = []string{"version"}
	case len(args) > 1 && args[0] == "help":
		return helpCommand(ctx, args[1:], stdin, stdout, stderr)
	}
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		usage(stdout)
		if len(args) == 0 {
			return exitUsage
		}
		return exitOK
	}
	for _, c := range commands() {
		if c.name == args[0] {
			ctx, stop := signalContext(ctx, stderr)
			defer stop()
			return c.run(ctx, args[1:], stdin, stdout, stderr)
		}
	}
	fmt.Fprintf(stderr, "etpulse: unknown command %q\n\n", args[0])
	usage(stderr)
	return exitUsage
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: etpulse <command> [flags]")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "commands:")
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-8s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w, "run 'etpulse help <command>' (or 'etpulse <command> --help') for a command's flags;")
	fmt.Fprintln(w, "'etpulse --version' prints the version.")
}

// helpCommand is 'etpulse help <command>': that command's --help.
func helpCommand(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	for _, c := range commands() {
		if c.name == args[0] {
			return c.run(ctx, []string{"--help"}, stdin, stdout, stderr)
		}
	}
	fmt.Fprintf(stderr, "etpulse help: unknown command %q\n\n", args[0])
	usage(stderr)
	return exitUsage
}

// signalContext cancels on the first SIGINT/SIGTERM (graceful shutdown) and
// exits the process on the second (forced).
func signalContext(parent context.Context, stderr io.Writer) (context.Context, func()) {
	notices := &signalNotices{stderr: stderr}
	ctx, cancel := context.WithCancel(withSignalNotices(parent, notices))
	ch := make(chan os.Signal, 2)
	signal.Notify(ch, syscall.SIGINT, syscall.SIGTERM)
	done := make(chan struct{})
	go func() {
		select {
		case <-ch:
			notices.say("shutting down (send the signal again to force)", false)
			cancel()
		case <-done:
			return
		}
		select {
		case <-ch:
			notices.say("forced exit", true)
			os.Exit(exitError)
		case <-done:
		}
	}()
	return ctx, func() {
		signal.Stop(ch)
		close(done)
		cancel()
	}
}
