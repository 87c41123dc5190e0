package main

import (
	"runtime"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestVersion: --version and the version command print the version, the
// revision and the Go version on one line, exit 0.
func TestVersion(t *testing.T) {
	for _, args := range [][]string{{"--version"}, {"version"}, {"-version"}} {
		code, out, errs := runCmd(t, args...)
		require.Equal(t, exitOK, code, errs)
		assert.True(t, strings.HasPrefix(out, "etpulse "), out)
		assert.Contains(t, out, "revision ")
		assert.Contains(t, out, runtime.Version())
		assert.Equal(t, 1, strings.Count(out, "\n"), out)
	}
}

// TestHelpCommand: 'etpulse help <command>' prints that command's help, as
// '<command> --help' does; an unknown one is a usage error naming it.
func TestHelpCommand(t *testing.T) {
	for _, name := range []string{"calc", "check", "run", "replay"} {
		code, out, errs := runCmd(t, "help", name)
		require.Equal(t, exitOK, code, errs)
		assert.True(t, strings.HasPrefix(out, "usage: etpulse "+name+" "), "help %s: %s", name, out)
		_, direct, _ := runCmd(t, name, "--help")
		assert.Equal(t, direct, out)
	}
	code, out, errs := runCmd(t, "help", "version")
	assert.Equal(t, exitOK, code, errs)
	assert.Contains(t, out, "usage: etpulse version")
	code, _, errs = runCmd(t, "help", "nosuch")
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errs, `etpulse help: unknown command "nosuch"`)
	code, out, _ = runCmd(t, "help")
	assert.Equal(t, exitOK, code)
	assert.Contains(t, out, "etpulse help <command>")
}

// TestConfigPathForms: the configuration can be given as --config FILE, as
// the first argument (flags may follow it) or in ETPULSE_CONFIG, for check
// and the other commands that read one.
func TestConfigPathForms(t *testing.T) {
	path := placeTimeConfig(t, "-121.74", "-8")
	for _, args := range [][]string{
		{"check", "--config", path},
		{"check", path},
		{"check", path, "--quiet"},
		{"check", "--quiet", path},
	} {
		code, _, errs := runCmd(t, args...)
		assert.Equal(t, exitOK, code, "%v: %s", args, errs)
	}
	code, out, errs := runCmd(t, "check", path, "--quiet")
	require.Equal(t, exitOK, code, errs)
	assert.Empty(t, out, "--quiet after the positional path still counts")

	t.Setenv("ETPULSE_CONFIG", path)
	code, out, errs = runCmd(t, "check")
	require.Equal(t, exitOK, code, errs)
	assert.Contains(t, out, path+": configuration is valid")

	// Given twice: refused, naming both.
	code, _, errs = runCmd(t, "check", "--config", path, "other.yaml")
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errs, `etpulse check: configuration given twice: --config `+path+` and "other.yaml"`)

	// The environment variable names a missing file: the error says where
	// the path came from.
	t.Setenv("ETPULSE_CONFIG", "/nonexistent/farm.yaml")
	code, _, errs = runCmd(t, "check")
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errs, "/nonexistent/farm.yaml")
	assert.Contains(t, errs, "(from ETPULSE_CONFIG)")

	// Nothing at all: the usage error lists the three forms.
	t.Setenv("ETPULSE_CONFIG", "")
	for _, name := range []string{"check", "run", "replay", "water"} {
		code, _, errs = runCmd(t, name)
		assert.Equal(t, exitUsage, code, name)
		assert.Contains(t, errs, "give the configuration file as the first argument, --config FILE or ETPULSE_CONFIG", name)
	}
	// run and water take it positionally too (they fail later, at the
	// broker or the flags, not at the path).
	code, _, errs = runCmd(t, "water", path)
	assert.Equal(t, exitUsage, code)
	assert.NotContains(t, errs, "give the configuration file")
}

// TestConfigPathReportExport: report and export take the configuration the
// same three ways as the other commands; export's --state wins over
// ETPULSE_CONFIG (the variable is a default, not a second file).
func TestConfigPathReportExport(t *testing.T) {
	path := placeTimeConfig(t, "-121.74", "-8")
	t.Setenv("ETPULSE_CONFIG", "")
	for _, args := range [][]string{
		{"report", path, "--format", "bogus"},
		{"report", "--format", "bogus", path},
	} {
		code, _, errs := runCmd(t, args...)
		assert.Equal(t, exitUsage, code, "%v", args)
		assert.Contains(t, errs, "--format: must be one of", "%v: the path was taken, the format refused", args)
	}
	code, _, errs := runCmd(t, "report")
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errs, configForms)
	code, _, errs = runCmd(t, "report", path, "other.yaml")
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errs, `unexpected argument "other.yaml"`)

	code, _, errs = runCmd(t, "export", "--from", "2024-07-01", "--to", "2024-07-02")
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errs, "give --state FILE, or the configuration as the first argument")

	// ETPULSE_CONFIG names a missing file: export says where it came from;
	// with --state the variable is not read at all.
	t.Setenv("ETPULSE_CONFIG", "/nonexistent/farm.yaml")
	code, _, errs = runCmd(t, "export", "--from", "2024-07-01", "--to", "2024-07-02")
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errs, "(from ETPULSE_CONFIG)")
	code, _, errs = runCmd(t, "export", "--from", "2024-07-01", "--to", "2024-07-02", "--state", "/nonexistent/state.db")
	assert.NotContains(t, errs, "give --state or --config, not both")
	assert.NotContains(t, errs, "ETPULSE_CONFIG")
	assert.NotEqual(t, exitOK, code)
}
