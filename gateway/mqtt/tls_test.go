package mqtt

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
	"etpulse/gateway/internal/testenv"
)

// dialConfig dials the broker described by b the way `etpulse run` does:
// through OptionsFromConfig, so secrets and TLS files are read from the
// configuration.
func dialConfig(t *testing.T, b config.Broker, limit time.Duration) (*Client, error) {
	t.Helper()
	o, err := OptionsFromConfig(b)
	if err != nil {
		return nil, err
	}
	o.CleanSession = true
	o.ConnectTimeout = 3 * time.Second
	ctx, cancel := context.WithTimeout(context.Background(), limit)
	defer cancel()
	c, err := Dial(ctx, o)
	if err == nil {
		t.Cleanup(func() { c.Close(0) })
	}
	return c, err
}

// roundTrip publishes one QoS 1 message from c to itself and waits for it.
func roundTrip(t *testing.T, c *Client) {
	t.Helper()
	topic := uniq(t) + "/rt"
	got := make(chan Message, 1)
	require.NoError(t, c.Subscribe(topic, 1, func(m Message) {
		m.Ack()
		got <- m
	}))
	require.NoError(t, c.Publish(context.Background(), topic, 1, false, []byte("kestrel-ridge")))
	select {
	case m := <-got:
		assert.Equal(t, "kestrel-ridge", string(m.Payload))
		assert.Equal(t, byte(1), m.QoS)
	case <-time.After(10 * time.Second):
		t.Fatal("no QoS 1 round trip over the connection")
	}
}

func TestTLSWithCAOnly(t *testing.T) {
	pki := testenv.NewPKI(t)
	b := testenv.NewMosquittoTLS(t, pki, false, "")
	c, err := dialConfig(t, config.Broker{URL: b.URL, ClientID: "etpulse-tls-ca", TLS: config.BrokerTLS{CAFile: pki.CAFile}}, 20*time.Second)
	require.NoError(t, err, "broker log: %s", b.Log())
	roundTrip(t, c)

	// The tls:// spelling of the scheme works the same.
	tlsURL := "tls" + b.URL[len("ssl"):]
	c2, err := dialConfig(t, config.Broker{URL: tlsURL, ClientID: "etpulse-tls-ca-2", TLS: config.BrokerTLS{CAFile: pki.CAFile}}, 20*time.Second)
	require.NoError(t, err)
	roundTrip(t, c2)
}

func TestTLSClientCertificate(t *testing.T) {
	pki := testenv.NewPKI(t)
	b := testenv.NewMosquittoTLS(t, pki, true, "")
	c, err := dialConfig(t, config.Broker{URL: b.URL, ClientID: "etpulse-tls-cert", TLS: config.BrokerTLS{
		CAFile: pki.CAFile, CertFile: pki.ClientCert, KeyFile: pki.ClientKey,
	}}, 20*time.Second)
	require.NoError(t, err, "broker log: %s", b.Log())
	roundTrip(t, c)

	// Without the client certificate the broker ends the handshake, and the
	// error says so at once.
	_, err = dialConfig(t, config.Broker{URL: b.URL, ClientID: "etpulse-tls-nocert", TLS: config.BrokerTLS{CAFile: pki.CAFile}}, 30*time.Second)
	require.Error(t, err)
	assert.Contains(t, err.Error(), "certificate required")
	assert.NotContains(t, err.Error(), "deadline exceeded", "not retried until the context ends")
}

// A server certificate from another CA is an error that names the cause,
// returned at once: retrying cannot fix a wrong ca_file.
func TestTLSWrongCA(t *testing.T) {
	pki := testenv.NewPKI(t)
	b := testenv.NewMosquittoTLS(t, pki, false, "")
	start := time.Now()
	_, err := dialConfig(t, config.Broker{URL: b.URL, ClientID: "etpulse-tls-wrong-ca", TLS: config.BrokerTLS{CAFile: pki.OtherCAFile}}, 30*time.Second)
	require.Error(t, err)
	assert.Contains(t, err.Error(), "certificate signed by unknown authority")
	assert.Contains(t, err.Error(), "ca_file")
	assert.NotContains(t, err.Error(), "deadline exceeded", "a certificate error is not retried until the context ends")
	t.Logf("failed after %s: %v", time.Since(start), err)

	// The right CA, but a host name the certificate does not name.
	local := strings.Replace(b.URL, "127.0.0.1", "localhost", 1)
	_, err = dialConfig(t, config.Broker{URL: local, ClientID: "etpulse-tls-wrong-host", TLS: config.BrokerTLS{CAFile: pki.CAFile}}, 30*time.Second)
	require.Error(t, err)
	assert.Contains(t, err.Error(), "wanted to match localhost")
	assert.NotContains(t, err.Error(), "deadline exceeded")
}

func TestTLSFilesMissing(t *testing.T) {
	_, err := OptionsFromConfig(config.Broker{URL: "ssl://127.0.0.1:8883", ClientID: "x",
		TLS: config.BrokerTLS{CAFile: filepath.Join(t.TempDir(), "nope.pem")}})
	require.Error(t, err)
	assert.Contains(t, err.Error(), "tls.ca_file")

	junk := filepath.Join(t.TempDir(), "junk.pem")
	require.NoError(t, os.WriteFile(junk, []byte("not a certificate\n"), 0o600))
	_, err = OptionsFromConfig(config.Broker{URL: "ssl://127.0.0.1:8883", ClientID: "x", TLS: config.BrokerTLS{CAFile: junk}})
	require.Error(t, err)
	assert.Contains(t, err.Error(), "no PEM certificate found")
}

// The password comes from an environment variable through config.Secret;
// a wrong one is refused at once, and the error never shows the password.
func TestPasswordFromEnvironment(t *testing.T) {
	pw := testenv.PasswordFile(t, "lowmead-gw", "right-horse-battery")
	b := testenv.NewMosquittoWith(t, fmt.Sprintf("allow_anonymous false\npassword_file %s\n", pw))
	const env = "ETPULSE_TEST_BROKER_PASSWORD"
	broker := config.Broker{URL: b.URL, ClientID: "etpulse-pw-env", Username: "lowmead-gw", Password: config.Secret{Env: env}}

	t.Setenv(env, "right-horse-battery")
	c, err := dialConfig(t, broker, 20*time.Second)
	require.NoError(t, err, "broker log: %s", b.Log())
	roundTrip(t, c)

	t.Setenv(env, "wrong-staple")
	start := time.Now()
	_, err = dialConfig(t, broker, 20*time.Second)
	require.Error(t, err)
	assert.Regexp(t, "not Authorized|bad user name or password", err.Error())
	assert.NotContains(t, err.Error(), "wrong-staple")
	assert.Less(t, time.Since(start), 15*time.Second, "a refusal is not retried until the context ends")

	// No password at all: refused as well (anonymous access is off).
	_, err = dialConfig(t, config.Broker{URL: b.URL, ClientID: "etpulse-pw-none"}, 20*time.Second)
	require.Error(t, err)
	assert.Regexp(t, "not Authorized|bad user name or password", err.Error())

	// An unset variable is a configuration error before any connection.
	require.NoError(t, os.Unsetenv(env))
	_, err = OptionsFromConfig(broker)
	require.Error(t, err)
	assert.Contains(t, err.Error(), "environment variable "+env+" is not set")
}

// The production shape: TLS with the CA, password from a file.
func TestTLSWithPasswordFile(t *testing.T) {
	pw := testenv.PasswordFile(t, "kestrel-gw", "orchard-dusk-7")
	pki := testenv.NewPKI(t)
	b := testenv.NewMosquittoTLS(t, pki, false, fmt.Sprintf("allow_anonymous false\npassword_file %s\n", pw))
	secret := filepath.Join(t.TempDir(), "broker-password")
	require.NoError(t, os.WriteFile(secret, []byte("orchard-dusk-7\n"), 0o600))
	c, err := dialConfig(t, config.Broker{URL: b.URL, ClientID: "etpulse-tls-pw", Username: "kestrel-gw",
		Password: config.Secret{File: secret}, TLS: config.BrokerTLS{CAFile: pki.CAFile}}, 20*time.Second)
	require.NoError(t, err, "broker log: %s", b.Log())
	roundTrip(t, c)
}
