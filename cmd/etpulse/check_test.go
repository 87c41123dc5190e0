package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func runCmd(t *testing.T, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var out, errb bytes.Buffer
	code = run(context.Background(), args, strings.NewReader(""), &out, &errb)
	return code, out.String(), errb.String()
}

// checkValid runs check on a valid file that gives no warning and returns
// its summary.
func checkValid(t *testing.T, path string) string {
	t.Helper()
	code, out, errs := runCmd(t, "check", "--config", path)
	require.Equal(t, 0, code, errs)
	assert.Empty(t, errs)
	return out
}

func TestCheckValid(t *testing.T) {
	t.Setenv("ETPULSE_BROKER_PASSWORD", "x")
	out := checkValid(t, "../../testdata/config/farm.yaml")
	for _, want := range []string{
		"configuration is valid",
		"broker    tcp://127.0.0.1:1883",
		"client id etpulse-saltbush-bend, user etpulse, password env:ETPULSE_BROKER_PASSWORD (redacted), tls off",
		"keepalive 45s, connect timeout 5s, max in-flight 512, max payload 32768 bytes",
		"sites     2, stations 3, sensor topics 7",
		"site orchard: 2 station(s), 0 zone(s), 0 water source(s)",
		"station terrace  34.6200 S 142.2100 E  61 m  UTC+10  reference short (ETos)  clear sky simple",
		"wind sensor at 3 m, min coverage 75%, close grace 3m, late window 12h, silence close 20m, max future 2m",
		"station creek",
		"reference tall (ETrs)  clear sky full",
		"reference fao56 (ETo)",
		"saltbush/orchard/terrace/rain",
		"tips x 0.2 mm",
		"counter; wraps at 655.35",
		"counter of tips x 0.254 mm; wraps at 65536",
		"urn:dev:flats-north:rn",
		"ignores battery_v,rssi",
	} {
		assert.Contains(t, out, want)
	}
	// one line per channel: every sensor topic with its quantity and unit
	assert.Regexp(t, `air-temp\s+saltbush/orchard/terrace/air-temp\s+number\s+-\s+air_temp\s+degC`, out)
	assert.Regexp(t, `humidity\s+saltbush/orchard/terrace/humidity\s+json\s+rh\s+rel_humidity\s+%\s+time key ts`, out)
	assert.Regexp(t, `combo\s+saltbush/orchard/creek/obs\s+fields\s+dewpt_f\s+dew_point\s+degF`, out)
	assert.Regexp(t, `\n\s+wind_mph\s+wind\s+mph`, out)
	assert.NotContains(t, out, "warning")
}

func TestCheckWarnsAboutMissingSecret(t *testing.T) {
	code, out, errs := runCmd(t, "check", "--quiet", "--config", "../../testdata/config/broker-tls.yaml")
	assert.Equal(t, 0, code)
	assert.Empty(t, out)
	assert.Contains(t, errs, "warning: broker options: password: secret: open /etc/etpulse/broker-password")
}

func TestCheckListsEveryProblem(t *testing.T) {
	doc := `
broker: {url: "ftp://x", password: inline-secret}
sites:
  - id: a
    stations:
      - id: s
        latitude: 91
        longitude: 12
        utc_offset_hours: 1
        sensors:
          - {id: t, topic: a/t, format: number, quantity: air_temp, unit: degC}
          - {id: u, topic: a/t, format: number, quantity: wind, unit: m/s}
`
	f := filepath.Join(t.TempDir(), "bad.yaml")
	require.NoError(t, os.WriteFile(f, []byte(doc), 0o600))
	code, out, errs := runCmd(t, "check", "--config", f)
	assert.Equal(t, 2, code)
	assert.Empty(t, out)
	want := f + `: 6 problem(s):
  broker.url: scheme must be tcp, ssl, tls, ws or wss, got "ftp://x"
  broker.password: must not be written inline; read it from an environment variable ({env: NAME}) or a file ({file: PATH})
  sites[0].stations[0].latitude: must be between -90 and 90 degrees, got 91
  sites[0].stations[0].sensors: no sensor measures solar, which the hourly ET needs
  sites[0].stations[0].sensors: no sensor measures humidity (rel_humidity, dew_point or vapour_pressure), which the hourly ET needs
  sites[0].stations[0].sensors[1].topic: topic "a/t" is already used by sites[0].stations[0].sensors[0]
`
	assert.Equal(t, want, errs)
	assert.NotContains(t, errs, "inline-secret")
}

func TestCheckEveryInvalidExampleExits2(t *testing.T) {
	files, err := filepath.Glob("../../testdata/config/invalid-*.yaml")
	require.NoError(t, err)
	require.NotEmpty(t, files)
	for _, f := range files {
		code, out, errs := runCmd(t, "check", "--config", f)
		assert.Equal(t, 2, code, f)
		assert.Empty(t, out, f)
		want, err := os.ReadFile(strings.TrimSuffix(f, ".yaml") + ".txt")
		require.NoError(t, err)
		// every line of the expected message (after its heading) is printed
		lines := strings.Split(strings.TrimSpace(string(want)), "\n")
		for _, l := range lines[1:] {
			assert.Contains(t, errs, strings.TrimSpace(l), f)
		}
	}
}

func TestCheckUsage(t *testing.T) {
	code, _, errs := runCmd(t, "check")
	assert.Equal(t, 2, code)
	assert.Contains(t, errs, "usage: etpulse check [--config] FILE")
	code, _, errs = runCmd(t, "check", "--config", "no-such-file.yaml")
	assert.Equal(t, 2, code)
	assert.Contains(t, errs, "no-such-file.yaml: load config: open no-such-file.yaml: no such file or directory")
}

func TestCheckZoneSummary(t *testing.T) {
	out := checkValid(t, "../../testdata/zones/brackenby.yaml")
	for _, want := range []string{
		// Drip pear block: TAW 120 mm x 1 m (FAO-56 eq. 82), RAW 0.5 x 120 (eq. 83);
		// RAW 60 mm / 0.9 / 1.2267 mm/h = 54.35 h = 3261 min rounded up.
		"zone pear-block-2  station mast  valve v2  source river-pump  drip  24000 m2  windows 20:00-06:00",
		"TAW 120 mm (root depth 1 m), RAW 60 mm (p 0.5), trigger 10 mm (trigger_mm), refill target 3 mm (0.05 x RAW)",
		"rate 1.2267 mm/h (drip layout 6 x 2.3 L/h / 11.25 m2), efficiency 0.9: RAW takes 3261 min",
		"one window 480 min = 8.83 mm net (20:00-06:00; bounded by max minutes)",
		"peak month ETc 5.89 mm/day (peak Kc 0.95 x 6.2 mm/day, largest month of fail_safe.fallback_et_mm_day) against a capacity of 8.83 mm/day (480 min/day): keeps up",
		// Sprinkler paddock with roots growing 0.3 -> 1 m: TAW 39-130 mm,
		// RAW 0.55 TAW; RAW minutes 21.45 / 0.75 / 5 x 60 = 343.2 -> 344.
		"TAW 39-130 mm (root depth 0.3-1 m), RAW 21.45-71.5 mm (p 0.55, adjusted daily: FAO-56 Table 22 footnote), trigger 21.45-71.5 mm (RAW), refill target 4.29-14.3 mm (0.2 x RAW)",
		"rate 5 mm/h (sprinkler layout 60 x 15 L/min / (12 m x 15 m)), efficiency 0.75: RAW takes 344-1144 min",
		"one window 360 min = 22.5 mm net (21:00-05:00, 3 cycles with 45 min soaks; bounded by max minutes)",
		// Peak Kc: maize Kc mid 1.20 adjusted by FAO-56 eq. 62 to 1.2708.
		"peak month ETc 8.9 mm/day (peak Kc 1.27 x 7 mm/day, default peak reference ET) against a capacity of 22.5 mm/day (360 min/day): keeps up",
	} {
		assert.Contains(t, out, want)
	}
}

func TestCheckPrintsWarningsAndExits0(t *testing.T) {
	code, out, errs := runCmd(t, "check", "--config", "../../testdata/config/warn-zone-peak-capacity.yaml")
	assert.Equal(t, 0, code)
	assert.Contains(t, out, "configuration is valid")
	assert.Contains(t, out, "against a capacity of 1.8 mm/day (60 min/day): CANNOT KEEP UP")
	assert.Contains(t, errs, "warning: sites[0].zones[0].system: this zone cannot keep up in the peak month: it can receive 1.8 mm/day net")

	files, err := filepath.Glob("../../testdata/config/warn-*.yaml")
	require.NoError(t, err)
	require.NotEmpty(t, files)
	for _, f := range files {
		code, _, errs := runCmd(t, "check", "--quiet", "--config", f)
		assert.Equal(t, 0, code, f)
		want, err := os.ReadFile(strings.TrimSuffix(f, ".yaml") + ".txt")
		require.NoError(t, err)
		assert.Contains(t, errs, "warning: "+strings.TrimSpace(string(want)), f)
	}
}

// TestRunLogsConfigWarnings: the daemon logs the plausibility warnings of
// its configuration at start-up, as check prints them.
func TestRunLogsConfigWarnings(t *testing.T) {
	b, err := os.ReadFile("../../testdata/config/warn-zone-peak-capacity.yaml")
	require.NoError(t, err)
	dir := t.TempDir()
	doc := strings.Replace(string(b), "sites:", "state: {path: '"+filepath.Join(dir, "s.db")+"'}\nhttp: {disabled: true}\nsites:", 1)
	f := filepath.Join(dir, "c.yaml")
	require.NoError(t, os.WriteFile(f, []byte(doc), 0o600))
	ctx, cancel := context.WithCancel(context.Background())
	cancel() // start and stop at once: only the start-up log matters here
	var out, errb bytes.Buffer
	run(ctx, []string{"run", "--config", f}, strings.NewReader(""), &out, &errb)
	assert.Contains(t, errb.String(), "implausible configuration")
	assert.Contains(t, errb.String(), "this zone cannot keep up in the peak month")
}
