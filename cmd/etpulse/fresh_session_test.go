package main

import (
	"context"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/demo"
	"etpulse/gateway/mqtt"
)

// TestFreshStateFileCleanSession runs `etpulse run` through mosquitto with
// a client id whose persistent session holds a queued reading from an
// earlier state file: with a fresh state file the gateway says so, starts
// a clean session and never receives the stale reading; the next start on
// the same (now existing) state file resumes the persistent session and
// gets what was published while it was stopped.
func TestFreshStateFileCleanSession(t *testing.T) {
	url := testBroker(t)
	dir := t.TempDir()
	root := fmt.Sprintf("fresh%08x", rand.Uint32())
	id := root + "-gw"
	sim := demo.New(demo.Options{Seed: 4, TopicRoot: root, Stations: []string{demo.Paddock}})
	doc := sim.ConfigYAML(demo.ConfigOptions{BrokerURL: url, ClientID: id, StatePath: filepath.Join(dir, "state.db")})
	cfgPath := filepath.Join(dir, "farm.yaml")
	require.NoError(t, os.WriteFile(cfgPath, []byte(doc), 0o600))
	topic := sim.Topic(demo.Paddock, "obs")
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()

	// The earlier run's session: subscribed, then away while a reading came.
	old, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: id})
	require.NoError(t, err)
	require.NoError(t, old.Subscribe(root+"/#", 1, func(m mqtt.Message) { m.Ack() }))
	old.Close(0)
	pub, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: root + "-pub", CleanSession: true})
	require.NoError(t, err)
	defer pub.Close(0)
	publishOne := func() { require.NoError(t, pub.Publish(ctx, topic, 1, false, []byte(`{"ts":"2026-01-12T05:00:00Z"}`))) }
	publishOne()

	first := runUntilRunning(t, cfgPath, filepath.Join(dir, "first.log"))
	assert.Contains(t, first, "fresh state file: starting a clean MQTT session, the broker's queued messages for client id "+id+" are discarded")
	assert.NotContains(t, first, "resumed session", "the stale reading was delivered")

	publishOne() // while the gateway is stopped: kept by its persistent session
	second := runUntilRunning(t, cfgPath, filepath.Join(dir, "second.log"))
	assert.NotContains(t, second, "fresh state file")
	assert.Contains(t, second, `msg="resumed session" messages=1`)
}

// runUntilRunning runs `etpulse run` until it logs "gateway running" and
// a second more (the start-up gathering of a resumed session), stops it,
// and returns its log.
func runUntilRunning(t *testing.T, cfgPath, logPath string) string {
	t.Helper()
	logFile, err := os.Create(logPath)
	require.NoError(t, err)
	defer logFile.Close()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan int, 1)
	go func() {
		done <- run(ctx, []string{"run", "--config", cfgPath}, strings.NewReader(""), io.Discard, logFile)
	}()
	read := func() string { b, _ := os.ReadFile(logPath); return string(b) }
	require.Eventually(t, func() bool { return strings.Contains(read(), "gateway running") }, 30*time.Second, 20*time.Millisecond, "%s", read())
	// A resumed session's queue arrives at once; the gateway gathers it
	// until it is quiet for 100 ms (gateway.startupQuiet), then logs
	// "resumed session". A second covers that on a busy machine.
	time.Sleep(time.Second)
	cancel()
	require.Equal(t, exitOK, <-done, read())
	return read()
}
