package main

import (
	"context"
	"flag"
	"fmt"
	"io"

	"etpulse/gateway/buildinfo"
)

// version and revision are stamped at build time: go build -ldflags
// "-X main.version=v1.2.0 -X main.revision=COMMIT" (deploy/release.sh
// stamps git describe and the commit). Empty: the module version or
// "(devel)", and the VCS revision of the Go build info.
var version, revision string

var versionHelp = helpText{
	name:  "version",
	usage: "etpulse version (or: etpulse --version)",
	intro: `Prints the version (the release stamp, else the module version), the VCS
revision the binary was built from and the Go version, on one line. The
same as 'etpulse --version'.`,
	outro: `Exit status: 0.`,
}

// runVersion prints the build's version line.
func runVersion(_ context.Context, args []string, _ io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("version", flag.ContinueOnError)
	if code, done := parseFlags(fs, args, versionHelp, stdout, stderr); done {
		return code
	}
	if fs.NArg() > 0 {
		return usageError(stderr, versionHelp, "unexpected argument %q", fs.Arg(0))
	}
	fmt.Fprintln(stdout, buildinfo.Read(version, revision))
	return exitOK
}
