// Package testenv gives tests the addresses of the real servers that
// deploy/test.sh starts on loopback. When a server is not available the test
// is skipped, unless ETPULSE_TEST_SERVERS=required (set by deploy/test.sh),
// in which case it fails: CI never silently skips a real-server test.
package testenv

import (
	"os"
	"testing"
)

func lookup(t testing.TB, name, what string) string {
	t.Helper()
	if v := os.Getenv(name); v != "" {
		return v
	}
	if os.Getenv("ETPULSE_TEST_SERVERS") == "required" {
		t.Fatalf("%s is required but %s is not set", what, name)
	}
	t.Skipf("%s not available (%s unset); run deploy/test.sh", what, name)
	return ""
}

// MQTT returns the URL of the test mosquitto broker, e.g. tcp://127.0.0.1:28123.
func MQTT(t testing.TB) string { return lookup(t, "ETPULSE_TEST_MQTT", "mosquitto broker") }

// Mosquitto returns the path of the mosquitto binary, for tests that start
// (and stop) a broker of their own, e.g. to restart it.
func Mosquitto(t testing.TB) string { return lookup(t, "ETPULSE_TEST_MOSQUITTO", "mosquitto binary") }

// Influx returns the base URL of the test store server that accepts the
// InfluxDB v2 write API (victoria-metrics), e.g. http://127.0.0.1:28124.
func Influx(t testing.TB) string { return lookup(t, "ETPULSE_TEST_INFLUX", "store server") }

// Victoria returns the path of the victoria-metrics binary, for tests that
// start and stop a store server of their own (outage tests).
func Victoria(t testing.TB) string {
	return lookup(t, "ETPULSE_TEST_VICTORIA", "victoria-metrics binary")
}
