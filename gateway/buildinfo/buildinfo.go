// Package buildinfo names the running build: its version, VCS revision and
// Go version, for `etpulse --version` and the etpulse_build_info metric.
package buildinfo

import (
	"fmt"
	"runtime"
	"runtime/debug"

	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway/internal/promreg"
)

// Info describes one build.
type Info struct {
	Version   string // release tag (git describe) stamped at build time, else the module version, else "(devel)"
	Revision  string // VCS revision, "-dirty" appended when the tree had changes; "unknown" without VCS data
	GoVersion string // the Go toolchain that built the binary
}

// Read returns the running build's Info. stamp and revStamp are the version
// and revision set at build time with -ldflags "-X main.version=... -X
// main.revision=..." (deploy/release.sh stamps git describe and the commit);
// empty means none, and the Go build info's module version and VCS
// revision are used.
func Read(stamp, revStamp string) Info {
	i := Info{Version: stamp, Revision: "unknown", GoVersion: runtime.Version()}
	bi, ok := debug.ReadBuildInfo()
	if ok {
		if i.Version == "" && bi.Main.Version != "" {
			i.Version = bi.Main.Version
		}
		var dirty bool
		for _, s := range bi.Settings {
			switch s.Key {
			case "vcs.revision":
				i.Revision = s.Value
			case "vcs.modified":
				dirty = s.Value == "true"
			}
		}
		if dirty && i.Revision != "unknown" {
			i.Revision += "-dirty"
		}
	}
	if revStamp != "" {
		i.Revision = revStamp
	}
	if i.Version == "" {
		i.Version = "(devel)"
	}
	return i
}

// String is the one line `etpulse --version` prints.
func (i Info) String() string {
	return fmt.Sprintf("etpulse %s (revision %s, %s)", i.Version, i.Revision, i.GoVersion)
}

// Register registers etpulse_build_info{version,revision,goversion}, a
// gauge that is always 1, with reg; a nil reg registers nothing.
func Register(reg prometheus.Registerer, i Info) error {
	g := prometheus.NewGauge(prometheus.GaugeOpts{
		Name:        "etpulse_build_info",
		Help:        "Always 1; the labels name the running build: version (release tag or -ldflags stamp), VCS revision and Go version.",
		ConstLabels: prometheus.Labels{"version": i.Version, "revision": i.Revision, "goversion": i.GoVersion},
	})
	g.Set(1)
	return promreg.Register(reg, "build info", g)
}
