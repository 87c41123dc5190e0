package main

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
	"etpulse/gateway/zones"
)

// waterConfig writes an invented one-site farm ("Wattle Flat", one drip zone
// "block-1": 1000 m2 at 6 mm/h, efficiency 0.9, TAW 130 mm, initial
// depletion 30 mm) using broker url and topic prefix, and returns its path.
func waterConfig(t *testing.T, url, prefix string) string {
	t.Helper()
	dir := t.TempDir()
	doc := fmt.Sprintf(`
broker: {url: '%s', client_id: %s}
topic_prefix: %s
state: {path: '%s'}
sites:
- id: wattle
  stations:
  - id: mast
    latitude: -34.2
    longitude: 142.1
    elevation_m: 60
    utc_offset_hours: 10
    sensors:
    - {id: t, topic: wattle/mast/t, format: number, quantity: air_temp, unit: degC}
    - {id: rh, topic: wattle/mast/rh, format: number, quantity: rel_humidity, unit: '%%'}
    - {id: u, topic: wattle/mast/u, format: number, quantity: wind, unit: m/s}
    - {id: rs, topic: wattle/mast/rs, format: number, quantity: solar, unit: W/m2}
  zones:
  - id: block-1
    station: mast
    area_m2: 1000
    crop: {kc: 1.0}
    soil: {field_capacity: 0.25, wilting_point: 0.12, root_depth_m: 1.0, p: 0.5, trigger_mm: 20, initial_depletion_mm: 30}
    system: {type: drip, rate_mm_h: 6, efficiency: 0.9, min_minutes: 5, max_minutes: 240, max_minutes_per_day: 300}
    windows: ["00:00-24:00"]
`, url, prefix+"-gw", prefix, filepath.Join(dir, "state.db"))
	path := filepath.Join(dir, "etpulse.yaml")
	require.NoError(t, os.WriteFile(path, []byte(doc), 0o600))
	return path
}

// testBroker returns the test broker's URL (deploy/test.sh sets
// ETPULSE_TEST_MQTT; gateway/internal/testenv is out of this package's
// reach): skipped without it, failed when the servers are required.
func testBroker(t *testing.T) string {
	t.Helper()
	url := os.Getenv("ETPULSE_TEST_MQTT")
	switch {
	case url != "":
	case os.Getenv("ETPULSE_TEST_SERVERS") == "required":
		t.Fatal("mosquitto broker is required but ETPULSE_TEST_MQTT is not set")
	default:
		t.Skip("mosquitto broker not available (ETPULSE_TEST_MQTT unset); run deploy/test.sh")
	}
	return url
}

// Bad command lines exit 2 before anything is sent (the broker in the
// configuration does not exist).
func TestWaterUsageErrors(t *testing.T) {
	cfg := waterConfig(t, "tcp://127.0.0.1:1", "wtest")
	base := []string{"water", "--config", cfg, "--who", "ana", "--why", "hand run"}
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"--zone", "block-1"}, "give exactly one of --mm, --minutes, --volume-l or --set-depletion, got 0"},
		{[]string{"--zone", "block-1", "--mm", "3", "--minutes", "4"}, "got 2 (--mm --minutes)"},
		{[]string{"--zone", "block-1", "--set-depletion", "3", "--frost"}, "--frost goes with an amount of water"},
		{[]string{"--zone", "block-9", "--mm", "3"}, `--zone: no zone "block-9" in site wattle`},
		{[]string{"--zone", "block-1", "--site", "other", "--mm", "3"}, `--site: no site "other" in the configuration (sites: wattle)`},
		{[]string{"--zone", "block-1", "--mm", "3", "--time", "last night"}, "--time:"},
		{[]string{"--mm", "3"}, "--zone is required"},
	} {
		code, out, errs := runCmd(t, append(base, tc.args...)...)
		assert.Equal(t, exitUsage, code, "%v: %s", tc.args, errs)
		assert.Empty(t, out)
		assert.Contains(t, errs, tc.want, tc.args)
	}
	code, _, errs := runCmd(t, "water", "--config", cfg, "--zone", "block-1", "--mm", "3", "--who", "", "--why", "x")
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errs, "who: required")
}

// TestWaterThroughGateway runs the zone service of the configuration on the
// real broker and the water command beside it: an accepted request prints
// the new depletion (exit 0), an implausible one prints the gateway's reason
// (exit 1), and the export of the local history shows the step with who and
// why. Without a gateway the command gives up after its timeout (exit 1).
func TestWaterThroughGateway(t *testing.T) {
	url := testBroker(t)
	prefix := fmt.Sprintf("wtest-%d-%d", os.Getpid(), time.Now().UnixNano()%1e9)
	cfgPath := waterConfig(t, url, prefix)
	cfg, err := config.Load(cfgPath)
	require.NoError(t, err)

	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	out, err := store.OpenOutbox(db, store.OutboxOptions{LocalOnly: true})
	require.NoError(t, err)
	dctx, dcancel := context.WithTimeout(context.Background(), 10*time.Second)
	gw, err := mqtt.Dial(dctx, mqtt.Options{URL: url, ClientID: prefix + "-gw"})
	dcancel()
	require.NoError(t, err)
	svc, err := zones.New(zones.Options{Config: cfg, DB: db, MQTT: gw, Store: out})
	require.NoError(t, err)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- svc.Run(ctx) }()
	stop := func() {
		if cancel != nil {
			cancel()
			require.NoError(t, <-done)
			gw.Close(time.Second)
			require.NoError(t, db.Close())
			cancel = nil
		}
	}
	t.Cleanup(stop)

	args := []string{"water", "--config", cfgPath, "--zone", "block-1", "--who", "ana", "--why", "hand run after the pump repair", "--timeout", "10s"}
	// 900 mm net is more than TAW 130: refused, nothing changes. The
	// service subscribes in its own goroutine: until it has, a request
	// goes unanswered, so this first (harmless) one is repeated until the
	// gateway answers.
	var code int
	var stdout, stderr string
	for range 5 {
		code, stdout, stderr = runCmd(t, append(args, "--mm", "900", "--timeout", "3s")...)
		if !strings.Contains(stderr, "no answer") {
			break
		}
	}
	assert.Equal(t, exitError, code, stderr)
	assert.Empty(t, stdout)
	assert.Contains(t, stderr, "etpulse water: refused: manual water zone block-1: mm: 900.0 mm net is more than 130.0 mm (TAW 130.0 mm); check the unit")

	// 40 minutes x 6 mm/h x 0.9 = 3.6 mm net: 30 -> 26.4.
	code, stdout, stderr = runCmd(t, append(args, "--minutes", "40")...)
	require.Equal(t, exitOK, code, stderr)
	assert.Contains(t, stdout, "recorded applied for zone block-1 of wattle: net 3.6 mm, drained 0.0 mm, depletion 30.0 -> 26.4 mm")

	// The same request id again (a retry): applied once.
	code, stdout, stderr = runCmd(t, append(args, "--minutes", "40", "--id", "retry-1")...)
	require.Equal(t, exitOK, code, stderr)
	assert.Contains(t, stdout, "depletion 26.4 -> 22.8 mm")
	code, stdout, stderr = runCmd(t, append(args, "--minutes", "40", "--id", "retry-1")...)
	require.Equal(t, exitOK, code, stderr)
	assert.Contains(t, stdout, "already recorded: request retry-1 was applied before; nothing applied again")

	stop()
	code, stdout, stderr = runCmd(t, "export", "--state", cfg.State.Path, "--from", "2000-01-01", "--to", "2100-01-01", "--measurement", "zone_step")
	require.Equal(t, exitOK, code, stderr)
	assert.Contains(t, stdout, "who")
	assert.Contains(t, stdout, "hand run after the pump repair")
	assert.Contains(t, stdout, "ana")
	assert.Contains(t, stdout, "manual")

	// The gateway is gone: no answer within the timeout.
	code, _, stderr = runCmd(t, "water", "--config", cfgPath, "--zone", "block-1", "--mm", "2", "--who", "ana", "--why", "x", "--timeout", "1s")
	assert.Equal(t, exitError, code)
	assert.Contains(t, stderr, "no answer on "+prefix+"/wattle/water/reply within 1s: is the gateway running for this site?")
}
