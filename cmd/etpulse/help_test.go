package main

import (
	"bytes"
	"context"
	"os"
	"regexp"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestHelpOnStdout: every sub-command's --help goes to stdout with exit 0,
// starts with its usage line and lists --help; a bad flag goes to stderr
// with exit 2 and points to --help.
func TestHelpOnStdout(t *testing.T) {
	for _, c := range commands() {
		t.Run(c.name, func(t *testing.T) {
			var out, errOut bytes.Buffer
			code := run(context.Background(), []string{c.name, "--help"}, nil, &out, &errOut)
			assert.Equal(t, exitOK, code)
			assert.Empty(t, errOut.String())
			assert.True(t, strings.HasPrefix(out.String(), "usage: etpulse "+c.name+" "), out.String())
			assert.Contains(t, out.String(), "  --help ")
			assert.Contains(t, out.String(), "Exit status:")

			out.Reset()
			errOut.Reset()
			code = run(context.Background(), []string{c.name, "--no-such-flag"}, nil, &out, &errOut)
			assert.Equal(t, exitUsage, code)
			assert.Empty(t, out.String())
			assert.Contains(t, errOut.String(), "etpulse "+c.name+": flag provided but not defined: -no-such-flag")
			assert.Contains(t, errOut.String(), "run 'etpulse "+c.name+" --help' for usage")
		})
	}
}

// TestHelpListsEveryFlag: the generated help of the commands built on
// parseFlags shows each flag with its value name and default.
func TestHelpListsEveryFlag(t *testing.T) {
	help := func(name string) string {
		var out, errOut bytes.Buffer
		require.Equal(t, exitOK, run(context.Background(), []string{name, "--help"}, nil, &out, &errOut))
		return out.String()
	}
	for name, lines := range map[string][]string{
		"demo":   {"--days N ", "--seed N ", "--speed X ", "--state FILE ", "--log-level LEVEL ", "(default 1)"},
		"run":    {"--config FILE ", "--log-format FORMAT ", "--log-level LEVEL ", "(default info)"},
		"check":  {"--config FILE ", "--quiet "},
		"replay": {"--config FILE ", "--in FILE ", "--state FILE ", "--zones FILE ", "--summary "},
		"export": {"--from TIME ", "--to TIME ", "--station STATION ", "--measurement LIST ", "--format FORMAT ", "--state FILE ", "--config FILE ", "valve_report"},
		"load": {"--broker URL ", "--stations N ", "--messages N ", "--duration D ", "--rate R ", "--interval D ",
			"--publishers N ", "--window N ", "--bad N ", "--dir DIR ", "--every D ", "--json ", "(default 200000)",
			"--cpuprofile FILE ", "--memprofile FILE ", "--memprofile-peak FILE "},
	} {
		h := help(name)
		for _, l := range lines {
			assert.Contains(t, h, l, "%s --help", name)
		}
	}
}

// TestReadmeCommandsUseRealFlags: every flag on an etpulse command line in
// README.md or DEVELOPERS.md (code blocks and inline code) is one the
// command's --help documents, so the documents cannot drift from the
// program.
func TestReadmeCommandsUseRealFlags(t *testing.T) {
	names := map[string]bool{}
	for _, c := range commands() {
		names[c.name] = true
	}
	// "etpulse NAME" and its arguments, across "\" line continuations, up to
	// the end of the line or of the inline code, a comment, a pipe or a
	// redirection.
	cmdLine := regexp.MustCompile(`etpulse ([a-z]+)((?:(?:[ \t]*\\\n[ \t]*|[ \t]+)[^ \t\n\\` + "`" + `#|>]+)*)`)
	flagRe := regexp.MustCompile(`(?:^|\s)(--[a-z][a-z-]*)`)
	checked := 0
	for _, doc := range []string{"../../README.md", "../../DEVELOPERS.md"} {
		text, err := os.ReadFile(doc)
		require.NoError(t, err)
		for _, m := range cmdLine.FindAllStringSubmatch(string(text), -1) {
			name := m[1]
			if !names[name] {
				continue
			}
			var out, errOut bytes.Buffer
			require.Equal(t, exitOK, run(context.Background(), []string{name, "--help"}, nil, &out, &errOut))
			for _, f := range flagRe.FindAllStringSubmatch(m[2], -1) {
				assert.True(t, strings.Contains(out.String(), "  "+f[1]+" "),
					"%s: `%s` uses %s, which 'etpulse %s --help' does not list", doc, strings.TrimSpace(m[0]), f[1], name)
				checked++
			}
		}
	}
	assert.Greater(t, checked, 20, "flags found on command lines in the documents")
}
