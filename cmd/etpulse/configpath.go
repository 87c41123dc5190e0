package main

import (
	"flag"
	"io"
	"os"
)

// configEnv names the environment variable that gives the configuration
// file when neither --config nor a first argument does.
const configEnv = "ETPULSE_CONFIG"

// configForms is how the usage errors name the three ways to give it.
const configForms = "give the configuration file as the first argument, --config FILE or " + configEnv

// parseConfigFlags parses args into fs like parseFlags and settles the
// configuration path in *path: --config FILE, else the first argument (flags
// may follow it: 'etpulse check farm.yaml --quiet'), else $ETPULSE_CONFIG.
// A path given both ways is a usage error. *path stays empty when none of
// the three gives one; the command says what it needs.
func parseConfigFlags(fs *flag.FlagSet, args []string, h helpText, path *string, stdout, stderr io.Writer) (int, bool) {
	if code, done := parseFlags(fs, args, h, stdout, stderr); done {
		return code, true
	}
	if fs.NArg() > 0 {
		pos := fs.Arg(0)
		rest := append([]string(nil), fs.Args()[1:]...)
		flagged := *path
		if code, done := parseFlags(fs, rest, h, stdout, stderr); done {
			return code, true
		}
		if *path != "" {
			if flagged == "" {
				flagged = *path
			}
			return usageError(stderr, h, "configuration given twice: --config %s and %q; give it once", flagged, pos), true
		}
		*path = pos
	}
	if *path == "" {
		*path = os.Getenv(configEnv)
	}
	return 0, false
}

// configOrigin is " (from ETPULSE_CONFIG)" when path is the one that
// variable gives, for messages about the file; else "".
func configOrigin(path string) string {
	if path != "" && path == os.Getenv(configEnv) {
		return " (from " + configEnv + ")"
	}
	return ""
}
