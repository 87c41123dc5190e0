package main

import (
	"context"
	"io"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/demo"
)

const unitFile = "../../deploy/etpulse.service"

// TestUnitSecurityScore scores the shipped unit with systemd's own offline
// review: exposure at or below 2.0 (the brief's target for an edge box that
// only needs its network, its state directory and its configuration).
func TestUnitSecurityScore(t *testing.T) {
	bin, err := exec.LookPath("systemd-analyze")
	if err != nil {
		t.Skip("systemd-analyze not installed (Debian package systemd); the unit's score is not checked")
	}
	dir := t.TempDir() // offline review of a copy: no unit of that name on this machine is read
	b, err := os.ReadFile(unitFile)
	require.NoError(t, err)
	require.NoError(t, os.WriteFile(filepath.Join(dir, "etpulse.service"), b, 0o644))
	cmd := exec.Command(bin, "security", "--offline=true", "--no-pager", "etpulse.service")
	cmd.Dir = dir
	out, err := cmd.CombinedOutput()
	if err != nil && strings.Contains(string(out), "offline") && strings.Contains(string(out), "nrecognized") {
		t.Skipf("this systemd-analyze has no --offline review: %s", out)
	}
	m := regexp.MustCompile(`Overall exposure level for etpulse\.service: ([0-9.]+)`).FindSubmatch(out)
	require.NotNil(t, m, "no score in the review (err %v):\n%s", err, out)
	score, err := strconv.ParseFloat(string(m[1]), 64)
	require.NoError(t, err)
	assert.LessOrEqual(t, score, 2.0, "exposure of deploy/etpulse.service:\n%s", out)
	assert.NotContains(t, string(out), "Unknown key", "directive this systemd does not know")
}

// The unit matches what the binary does: Type=notify with a watchdog (the
// daemon sends READY=1 and WATCHDOG=1), a quiet configuration check before
// every start, and writes only in its state directory.
func TestUnitMatchesDaemon(t *testing.T) {
	b, err := os.ReadFile(unitFile)
	require.NoError(t, err)
	unit := string(b)
	for _, line := range []string{
		"Type=notify",
		"NotifyAccess=main",
		"ExecStartPre=/usr/local/bin/etpulse check --quiet --config /etc/etpulse/etpulse.yaml",
		"ProtectSystem=strict",
		"StateDirectory=etpulse",
		"ReadWritePaths=/var/lib/etpulse",
		"RestrictAddressFamilies=AF_INET AF_INET6 AF_UNIX",
	} {
		assert.True(t, strings.Contains(unit, "\n"+line+"\n"), "deploy/etpulse.service lacks the line %s", line)
	}
	m := regexp.MustCompile(`\nWatchdogSec=(\d+)s\n`).FindStringSubmatch(unit)
	require.NotNil(t, m, "WatchdogSec=<n>s")
	n, _ := strconv.Atoi(m[1])
	// The intake loop beats at least every 30 s (the longest retry while
	// paused); the watchdog pings while the beat is within 2/3 of the interval.
	assert.GreaterOrEqual(t, n, 60, "WatchdogSec too short for the intake loop's beat")
}

// listenNotify is a fake systemd notification socket in dir; it returns
// its path and the datagrams received.
func listenNotify(t *testing.T, dir string) (string, <-chan string) {
	t.Helper()
	path := filepath.Join(dir, "notify.sock")
	conn, err := net.ListenUnixgram("unixgram", &net.UnixAddr{Name: path, Net: "unixgram"})
	require.NoError(t, err)
	t.Cleanup(func() { conn.Close() })
	got := make(chan string, 100)
	go func() {
		buf := make([]byte, 4096)
		for {
			n, err := conn.Read(buf)
			if err != nil {
				return
			}
			got <- string(buf[:n])
		}
	}()
	return path, got
}

func waitNotify(t *testing.T, got <-chan string, want string, within time.Duration) {
	t.Helper()
	deadline := time.After(within)
	for {
		select {
		case s := <-got:
			if s == want {
				return
			}
		case <-deadline:
			t.Fatalf("no %s on the notification socket within %s", want, within)
		}
	}
}

// `etpulse run` under a Type=notify unit: READY=1 once it takes messages,
// WATCHDOG=1 while the intake loop lives, STOPPING=1 at shutdown.
func TestRunNotifiesSystemd(t *testing.T) {
	srv, url, err := demo.StartBroker(true)
	require.NoError(t, err)
	t.Cleanup(func() { _ = srv.Close() })
	dir := t.TempDir()
	sock, got := listenNotify(t, dir)
	t.Setenv("NOTIFY_SOCKET", sock)
	t.Setenv("WATCHDOG_USEC", "1500000") // pings every 0.5 s
	t.Setenv("WATCHDOG_PID", strconv.Itoa(os.Getpid()))

	sim := demo.New(demo.Options{Seed: 3, TopicRoot: "sdnotify", Stations: []string{demo.Paddock}})
	doc := sim.ConfigYAML(demo.ConfigOptions{BrokerURL: url, ClientID: "sdnotify-gw", StatePath: filepath.Join(dir, "state.db")})
	cfgPath := filepath.Join(dir, "farm.yaml")
	require.NoError(t, os.WriteFile(cfgPath, []byte(doc), 0o600))

	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	done := make(chan int, 1)
	logFile, err := os.Create(filepath.Join(dir, "gateway.log")) // an *os.File takes the daemon's concurrent writes
	require.NoError(t, err)
	defer logFile.Close()
	go func() {
		done <- run(ctx, []string{"run", "--config", cfgPath}, strings.NewReader(""), io.Discard, logFile)
	}()
	waitNotify(t, got, "READY=1", 20*time.Second)
	waitNotify(t, got, "WATCHDOG=1", 5*time.Second)
	waitNotify(t, got, "WATCHDOG=1", 5*time.Second)
	cancel()
	waitNotify(t, got, "STOPPING=1", 10*time.Second)
	code := <-done
	logs, _ := os.ReadFile(logFile.Name())
	assert.Equal(t, exitOK, code, string(logs))
}
