package mqtt

import (
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
)

// writeSelfSigned writes a self-signed certificate and its key as PEM files.
func writeSelfSigned(t *testing.T, dir string) (certFile, keyFile string) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	require.NoError(t, err)
	tmpl := &x509.Certificate{
		SerialNumber:          big.NewInt(1),
		Subject:               pkix.Name{CommonName: "saltbush test ca"},
		NotBefore:             time.Unix(0, 0),
		NotAfter:              time.Unix(1<<33, 0),
		IsCA:                  true,
		BasicConstraintsValid: true,
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	require.NoError(t, err)
	kb, err := x509.MarshalECPrivateKey(key)
	require.NoError(t, err)
	certFile, keyFile = filepath.Join(dir, "cert.pem"), filepath.Join(dir, "key.pem")
	require.NoError(t, os.WriteFile(certFile, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o600))
	require.NoError(t, os.WriteFile(keyFile, pem.EncodeToMemory(&pem.Block{Type: "EC PRIVATE KEY", Bytes: kb}), 0o600))
	return certFile, keyFile
}

func TestOptionsFromConfig(t *testing.T) {
	dir := t.TempDir()
	cert, key := writeSelfSigned(t, dir)
	pw := filepath.Join(dir, "pw")
	require.NoError(t, os.WriteFile(pw, []byte("tumbleweed\n"), 0o600))

	b := config.Broker{
		URL: "ssl://broker.example:8883", ClientID: "etpulse-x", Username: "gw",
		Password:       config.Secret{File: pw},
		TLS:            config.BrokerTLS{CAFile: cert, CertFile: cert, KeyFile: key},
		KeepAlive:      config.Duration(45 * time.Second),
		ConnectTimeout: config.Duration(5 * time.Second),
		MaxInflight:    77,
	}
	o, err := OptionsFromConfig(b)
	require.NoError(t, err)
	assert.Equal(t, "tumbleweed", o.Password, "trailing newline trimmed")
	assert.Equal(t, "gw", o.Username)
	assert.Equal(t, 45*time.Second, o.KeepAlive)
	assert.Equal(t, 5*time.Second, o.ConnectTimeout)
	assert.Equal(t, 77, o.MaxInflight)
	assert.False(t, o.CleanSession, "persistent session by default")
	require.NotNil(t, o.TLS)
	assert.NotNil(t, o.TLS.RootCAs)
	assert.Len(t, o.TLS.Certificates, 1)
	assert.False(t, o.TLS.InsecureSkipVerify)

	t.Setenv("ETPULSE_TEST_PW", "from-env")
	o, err = OptionsFromConfig(config.Broker{URL: "tcp://h:1883", ClientID: "c", Username: "u", Password: config.Secret{Env: "ETPULSE_TEST_PW"}})
	require.NoError(t, err)
	assert.Equal(t, "from-env", o.Password)
	assert.Nil(t, o.TLS, "no TLS for tcp://")

	_, err = OptionsFromConfig(config.Broker{URL: "tcp://h:1883", Password: config.Secret{Env: "ETPULSE_TEST_UNSET_PW"}})
	assert.EqualError(t, err, "broker options: password: secret: environment variable ETPULSE_TEST_UNSET_PW is not set")

	_, err = OptionsFromConfig(config.Broker{URL: "ssl://h:8883", TLS: config.BrokerTLS{CAFile: pw}})
	assert.EqualError(t, err, "broker options: tls.ca_file "+pw+": no PEM certificate found")

	_, err = OptionsFromConfig(config.Broker{URL: "ssl://h:8883", TLS: config.BrokerTLS{CAFile: filepath.Join(dir, "missing.pem")}})
	assert.ErrorContains(t, err, "broker options: tls.ca_file: open ")
}

func TestMatchTopic(t *testing.T) {
	for _, c := range []struct {
		filter, topic string
		match         bool
	}{
		{"a/b", "a/b", true},
		{"a/b", "a/c", false},
		{"a/+", "a/b", true},
		{"a/+", "a/b/c", false},
		{"a/#", "a", true},
		{"a/#", "a/b/c", true},
		{"#", "a/b", true},
		{"+/+", "a/b", true},
		{"+", "", true},
		{"a/+/c", "a//c", true},
		{"#", "$SYS/x", false},
		{"+/x", "$SYS/x", false},
		{"$SYS/#", "$SYS/x", true},
	} {
		assert.Equal(t, c.match, MatchTopic(c.filter, c.topic), "%s ~ %s", c.filter, c.topic)
	}
	for _, f := range []string{"a/b", "a/+/c", "#", "a/#", "+"} {
		assert.NoError(t, ValidFilter(f), f)
	}
	for _, f := range []string{"", "a/#/b", "a/b#", "a+/b", "a/\x00"} {
		assert.Error(t, ValidFilter(f), f)
	}
}
