package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"strings"
)

// helpText describes one sub-command for --help and for usage errors.
type helpText struct {
	name  string // sub-command, e.g. "demo"
	usage string // one line after "usage: "
	intro string // paragraphs between the usage line and the flags
	outro string // paragraphs after the flags (formats, exit status, examples)
}

// parseFlags parses args into fs. With --help or -h it prints the help to
// stdout and returns (exitOK, true); on a bad flag it prints the problem and
// a pointer to --help on stderr and returns (exitUsage, true). Otherwise it
// returns (0, false) and the command goes on.
func parseFlags(fs *flag.FlagSet, args []string, h helpText, stdout, stderr io.Writer) (int, bool) {
	fs.SetOutput(io.Discard)
	fs.Usage = func() {}
	err := fs.Parse(args)
	switch {
	case err == nil:
		return 0, false
	case errors.Is(err, flag.ErrHelp):
		h.print(stdout, fs)
		return exitOK, true
	default:
		return usageError(stderr, h, "%v", err), true
	}
}

// usageError prints "etpulse NAME: problem", the usage line and a pointer to
// --help on stderr and returns exitUsage.
func usageError(stderr io.Writer, h helpText, format string, a ...any) int {
	fmt.Fprintf(stderr, "etpulse %s: %s\n", h.name, fmt.Sprintf(format, a...))
	fmt.Fprintf(stderr, "usage: %s\nrun 'etpulse %s --help' for usage\n", h.usage, h.name)
	return exitUsage
}

// print writes the help: usage line, intro, every flag of fs with its value
// name, text and default, then the outro.
func (h helpText) print(w io.Writer, fs *flag.FlagSet) {
	fmt.Fprintf(w, "usage: %s\n", h.usage)
	if h.intro != "" {
		fmt.Fprintf(w, "\n%s\n", strings.TrimRight(h.intro, "\n"))
	}
	type row struct{ left, text string }
	var rows []row
	width := 0
	fs.VisitAll(func(f *flag.Flag) {
		value, text := flag.UnquoteUsage(f)
		left := "--" + f.Name
		if value != "" {
			left += " " + strings.ToUpper(value)
		}
		if def := f.DefValue; def != "" && def != "0" && def != "false" && !strings.Contains(text, "(default") {
			text += " (default " + def + ")"
		}
		rows = append(rows, row{left, text})
		width = max(width, len(left))
	})
	rows = append(rows, row{"--help", "this text"})
	fmt.Fprintln(w, "\nFlags:")
	indent := 2 + width + 2
	for _, r := range rows {
		lines := wrap(r.text, 78-indent)
		fmt.Fprintf(w, "  %-*s  %s\n", width, r.left, lines[0])
		for _, l := range lines[1:] {
			fmt.Fprintf(w, "%*s%s\n", indent, "", l)
		}
	}
	if h.outro != "" {
		fmt.Fprintf(w, "\n%s\n", strings.TrimRight(h.outro, "\n"))
	}
}

// wrap splits text into lines of at most width runes where it can (a longer
// word keeps its own line).
func wrap(text string, width int) []string {
	width = max(width, 20)
	var lines []string
	line := ""
	for _, word := range strings.Fields(text) {
		switch {
		case line == "":
			line = word
		case len([]rune(line))+1+len([]rune(word)) <= width:
			line += " " + word
		default:
			lines = append(lines, line)
			line = word
		}
	}
	return append(lines, line)
}
