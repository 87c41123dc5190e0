package config

import (
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func TestBrokerDefaults(t *testing.T) {
	doc := `
sites:
  - id: kestrel-hill
    stations:
      - id: s
        sensors:
          - {id: t, topic: k/t, format: number, quantity: air_temp, unit: degC}
          - {id: d, topic: k/d, format: number, quantity: dew_point, unit: degC}
          - {id: u, topic: k/u, format: number, quantity: wind, unit: m/s}
          - {id: r, topic: k/r, format: number, quantity: solar, unit: W/m2}
  - id: lowmead
    stations:
      - id: s
        sensors:
          - {id: t, topic: l/t, format: number, quantity: air_temp, unit: degC}
          - {id: d, topic: l/d, format: number, quantity: vapour_pressure, unit: kPa}
          - {id: u, topic: l/u, format: number, quantity: wind, unit: m/s}
          - {id: r, topic: l/r, format: number, quantity: solar, unit: W/m2}
`
	c, err := Parse([]byte(doc))
	require.NoError(t, err)
	b := c.Broker
	assert.Equal(t, "tcp://127.0.0.1:1883", b.URL)
	assert.Equal(t, "etpulse-kestrel-hill-lowmead", b.ClientID, "client id derived from the site ids, stable across restarts")
	assert.Equal(t, 30*time.Second, b.KeepAlive.D())
	assert.Equal(t, 10*time.Second, b.ConnectTimeout.D())
	assert.Equal(t, 256, b.MaxInflight)
	assert.Equal(t, 65536, b.MaxPayloadBytes)
	assert.False(t, b.Password.IsSet())
	assert.False(t, b.TLSScheme())
}

func TestBrokerTLSExample(t *testing.T) {
	c, err := Load(filepath.Join(configDir, "broker-tls.yaml"))
	require.NoError(t, err)
	b := c.Broker
	assert.True(t, b.TLSScheme())
	assert.Equal(t, BrokerTLS{CAFile: "/etc/etpulse/ca.pem", CertFile: "/etc/etpulse/client.pem", KeyFile: "/etc/etpulse/client.key"}, b.TLS)
	assert.Equal(t, "file:/etc/etpulse/broker-password (redacted)", b.Password.String())
	assert.Equal(t, "etpulse-orchard", b.ClientID)
}

// TestInlinePasswordNotEchoed: the error explains the fix and never repeats
// the secret itself.
func TestInlinePasswordNotEchoed(t *testing.T) {
	_, err := Load(filepath.Join(configDir, "invalid-broker-password-inline.yaml"))
	require.Error(t, err)
	assert.NotContains(t, err.Error(), "hunter2")
	assert.Contains(t, err.Error(), "broker.password: must not be written inline")
}

func TestSecretFromEnvAndFile(t *testing.T) {
	t.Setenv("ETPULSE_TEST_BROKER_PW", "s3cret")
	v, err := Secret{Env: "ETPULSE_TEST_BROKER_PW"}.Resolve()
	require.NoError(t, err)
	assert.Equal(t, "s3cret", v)

	_, err = Parse([]byte("broker: {username: u, password: {env: X, vault: y}}\nsites: []"))
	require.Error(t, err)
	assert.Contains(t, err.Error(), "broker.password.vault: unknown key", "secrets decode strictly too")
}
