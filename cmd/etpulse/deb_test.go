package main

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestDebianPackage builds the amd64 .deb with deploy/release.sh, checks
// its contents and control data, and (as root, under deploy/test.sh or
// with ETPULSE_TEST_DEB_INSTALL=1) installs it on this machine, runs the
// unit's ExecStartPre check on the example configuration as the package's
// user etpulse, and purges it again. The install changes the machine while
// it runs (a package, a system user, /var/lib/etpulse): it is meant for the
// CI box, and refuses to touch a machine that already has an etpulse
// package or user. Without dpkg-deb it skips (fails with
// ETPULSE_TEST_SERVERS=required).
func TestDebianPackage(t *testing.T) {
	required := os.Getenv("ETPULSE_TEST_SERVERS") == "required"
	skip := func(format string, a ...any) {
		t.Helper()
		if required {
			t.Fatalf(format, a...)
		}
		t.Skipf(format, a...)
	}
	if _, err := exec.LookPath("dpkg-deb"); err != nil {
		skip("dpkg-deb not found: install dpkg to build the package")
	}
	sh := func(name string, args ...string) (string, string, error) {
		t.Helper()
		var out, errb bytes.Buffer
		c := exec.Command(name, args...)
		c.Stdout, c.Stderr = &out, &errb
		err := c.Run()
		return out.String(), errb.String(), err
	}
	dist := t.TempDir()
	_, errs, err := sh("bash", "../../deploy/release.sh", "--arch", "amd64", "--out", dist, "--version", "v0.0.0-test")
	require.NoError(t, err, errs)
	deb := filepath.Join(dist, "etpulse_0.0.0+test_amd64.deb")
	require.FileExists(t, deb)
	require.FileExists(t, filepath.Join(dist, "etpulse-v0.0.0-test-linux-amd64"))

	contents, errs, err := sh("dpkg-deb", "-c", deb)
	require.NoError(t, err, errs)
	for _, want := range []string{"-rwxr-xr-x root/root", "./usr/bin/etpulse", "./lib/systemd/system/etpulse.service", "-rw-r----- root/root", "./etc/etpulse/etpulse.yaml"} {
		assert.Contains(t, contents, want)
	}
	info, errs, err := sh("dpkg-deb", "-I", deb)
	require.NoError(t, err, errs)
	for _, want := range []string{"Package: etpulse", "Version: 0.0.0+test", "Architecture: amd64", "conffiles", "postinst", "postrm"} {
		assert.Contains(t, info, want)
	}
	unpacked := t.TempDir()
	_, errs, err = sh("dpkg-deb", "-x", deb, unpacked)
	require.NoError(t, err, errs)
	unit, err := os.ReadFile(filepath.Join(unpacked, "lib/systemd/system/etpulse.service"))
	require.NoError(t, err)
	assert.Contains(t, string(unit), "ExecStart=/usr/bin/etpulse run --config /etc/etpulse/etpulse.yaml")
	assert.NotContains(t, string(unit), "/usr/local/bin")
	ver, errs, err := sh(filepath.Join(unpacked, "usr/bin/etpulse"), "--version")
	require.NoError(t, err, errs)
	assert.True(t, strings.HasPrefix(ver, "etpulse v0.0.0-test (revision "), ver)

	if os.Geteuid() != 0 {
		skip("installing the package needs root")
	}
	if !required && os.Getenv("ETPULSE_TEST_DEB_INSTALL") == "" {
		t.Skip("the install changes this machine for the test's duration; it runs under deploy/test.sh (ETPULSE_TEST_SERVERS=required) or with ETPULSE_TEST_DEB_INSTALL=1")
	}
	// One install at a time on this machine.
	lock, err := os.OpenFile(filepath.Join(os.TempDir(), "etpulse-deb-test.lock"), os.O_CREATE|os.O_RDWR, 0o600)
	require.NoError(t, err)
	defer lock.Close()
	require.NoError(t, syscall.Flock(int(lock.Fd()), syscall.LOCK_EX))
	if _, _, err := sh("dpkg", "-s", "etpulse"); err == nil {
		skip("an etpulse package is installed on this machine; the test does not replace it")
	}
	if _, _, err := sh("getent", "passwd", "etpulse"); err == nil {
		skip("a user etpulse exists that the package did not create; the test's purge would remove it")
	}
	purged := false
	purge := func() {
		out, errs, err := sh("dpkg", "--purge", "etpulse")
		require.NoError(t, err, out+errs)
		purged = true
	}
	t.Cleanup(func() {
		if !purged {
			_, _, _ = sh("dpkg", "--purge", "etpulse")
		}
	})
	out, errs, err := sh("dpkg", "-i", deb)
	require.NoError(t, err, out+errs)
	assert.Contains(t, out, "etpulse: edit /etc/etpulse/etpulse.yaml")

	pw, _, err := sh("getent", "passwd", "etpulse")
	require.NoError(t, err, "the package created its user")
	assert.Contains(t, pw, ":/var/lib/etpulse:/usr/sbin/nologin")
	st, err := os.Stat("/var/lib/etpulse")
	require.NoError(t, err)
	assert.Equal(t, os.ModeDir|0o700, st.Mode())
	owner, _, err := sh("stat", "-c", "%U:%G %a", "/var/lib/etpulse", "/etc/etpulse", "/etc/etpulse/etpulse.yaml")
	require.NoError(t, err)
	assert.Equal(t, "etpulse:etpulse 700\nroot:etpulse 750\nroot:etpulse 640\n", owner)

	// The unit's ExecStartPre, as its user: valid, silent on stdout; the
	// secrets only the real box has are warnings on stderr.
	var pre []string
	for _, line := range strings.Split(string(unit), "\n") {
		if v, ok := strings.CutPrefix(line, "ExecStartPre="); ok {
			pre = strings.Fields(v)
		}
	}
	require.NotEmpty(t, pre)
	out, errs, err = sh("runuser", append([]string{"-u", "etpulse", "--"}, pre...)...)
	require.NoError(t, err, errs)
	assert.Empty(t, out)
	assert.Contains(t, errs, "warning: ")
	out, errs, err = sh("runuser", "-u", "etpulse", "--", "etpulse", "check", "/etc/etpulse/etpulse.yaml")
	require.NoError(t, err, errs)
	assert.Contains(t, out, "/etc/etpulse/etpulse.yaml: configuration is valid")

	purge()
	_, _, err = sh("getent", "passwd", "etpulse")
	assert.Error(t, err, "purge removed the user")
	for _, gone := range []string{"/var/lib/etpulse", "/usr/bin/etpulse", "/lib/systemd/system/etpulse.service", "/etc/etpulse"} {
		assert.NoFileExists(t, gone)
		assert.NoDirExists(t, gone)
	}
}
