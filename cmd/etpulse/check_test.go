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

func TestCheckValid(t *testing.T) {
	t.Setenv("ETPULSE_BROKER_PASSWORD", "x")
	code, out, errs := runCmd(t, "check", "--config", "../../testdata/config/farm.yaml")
	require.Equal(t, 0, code, errs)
	assert.Empty(t, errs)
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
	assert.Regexp(t, `combo\s+saltbush/orchard/creek/obs\s+fields\s+dewptf\s+dew_point\s+degF`, out)
	assert.Regexp(t, `\n\s+windmph\s+wind\s+mph`, out)
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
	assert.Contains(t, errs, "usage: etpulse check --config FILE")
	code, _, errs = runCmd(t, "check", "--config", "no-such-file.yaml")
	assert.Equal(t, 2, code)
	assert.Contains(t, errs, "no-such-file.yaml: load config: open no-such-file.yaml: no such file or directory")
}
