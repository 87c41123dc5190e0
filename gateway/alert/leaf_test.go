package alert_test

import (
	"os/exec"
	"slices"
	"strings"
	"testing"
)

// deps lists the etpulse packages that pkg imports, directly or not.
func deps(t *testing.T, pkg string) []string {
	t.Helper()
	goBin, err := exec.LookPath("go")
	if err != nil {
		t.Fatalf("find the go command to list imports: %v (put go on PATH)", err)
	}
	out, err := exec.Command(goBin, "list", "-deps", "-f", "{{.ImportPath}}", pkg).Output()
	if err != nil {
		t.Fatalf("go list -deps %s: %v", pkg, err)
	}
	var own []string
	for _, p := range strings.Fields(string(out)) {
		if strings.HasPrefix(p, "etpulse/") && p != pkg {
			own = append(own, p)
		}
	}
	return own
}

// TestLeaf keeps the alert vocabulary a leaf: it imports no gateway
// package, and the zone scheduler and the outbox watch's package reach it
// without importing the sensor monitor (gateway/quality).
func TestLeaf(t *testing.T) {
	if got := deps(t, "etpulse/gateway/alert"); !slices.Equal(got, []string{"etpulse/hourly"}) {
		t.Errorf("gateway/alert imports %v; want only etpulse/hourly", got)
	}
	if got := deps(t, "etpulse/gateway/zones"); slices.Contains(got, "etpulse/gateway/quality") {
		t.Errorf("gateway/zones imports gateway/quality (through %v); use gateway/alert for the alert types", got)
	}
}
