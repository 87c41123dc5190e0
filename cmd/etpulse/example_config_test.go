package main

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
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/ingest"
)

const exampleConfig = "../../deploy/etpulse.example.yaml"

// TestExampleConfigLoads keeps the shipped production example valid and
// complete: it loads, every station routes, every zone builds its controller,
// and the settings the example is there to show are present.
func TestExampleConfigLoads(t *testing.T) {
	cfg, err := config.Load(exampleConfig)
	require.NoError(t, err)
	_, err = ingest.NewRouter(cfg)
	require.NoError(t, err)

	assert.Equal(t, "quenby/etpulse", cfg.TopicPrefix)
	assert.Equal(t, "quenby/etpulse", cfg.Alerts.TopicPrefix)
	b := cfg.Broker
	assert.True(t, b.TLSScheme(), "the example connects over TLS")
	assert.NotEmpty(t, b.TLS.CAFile)
	assert.NotEmpty(t, b.Password.File, "the broker password comes from a file")
	assert.NotEmpty(t, b.Username)
	assert.True(t, strings.HasPrefix(cfg.State.Path, "/var/lib/etpulse/"), cfg.State.Path)
	assert.Equal(t, "ETPULSE_STORE_TOKEN", cfg.Store.Token.Env)
	assert.False(t, cfg.Store.Local())
	assert.True(t, strings.HasPrefix(cfg.HTTP.Listen, "127.0.0.1:"), "metrics on loopback")
	require.NotEmpty(t, cfg.Alerts.Stations)

	require.Len(t, cfg.Sites, 1)
	site := &cfg.Sites[0]
	assert.Len(t, site.Stations, 2)
	require.Len(t, site.Sources, 1)
	require.Len(t, site.Zones, 2)
	types := map[string]bool{}
	for i := range site.Zones {
		z := &site.Zones[i]
		types[z.System.Type] = true
		assert.Equal(t, site.Sources[0].ID, z.Source)
		cz, err := z.Controller(site.StationByID(z.Station))
		require.NoError(t, err, "zone %s", z.ID)
		assert.Positive(t, cz.System.Rate, "zone %s", z.ID)
		assert.Positive(t, z.System.MaxMinutes)
		assert.Positive(t, z.System.MaxMinutesPerDay)
	}
	assert.Equal(t, map[string]bool{"drip": true, "sprinkler": true}, types)
}

// TestExampleConfigChecks runs `etpulse check` on the example as systemd's
// ExecStartPre would on a machine that lacks its secrets and TLS files:
// valid (exit 0), each missing input only a warning.
func TestExampleConfigChecks(t *testing.T) {
	t.Setenv("ETPULSE_STORE_TOKEN", "") // restored after the test
	require.NoError(t, os.Unsetenv("ETPULSE_STORE_TOKEN"))
	code, out, errs := runCmd(t, "check", "--config", exampleConfig)
	require.Equal(t, 0, code, errs)
	assert.Contains(t, out, "configuration is valid")
	assert.Contains(t, out, "site quenby-vale: 2 station(s), 2 zone(s), 1 water source(s)")
	assert.Contains(t, out, "records quenby/etpulse/<site>/<station>/hour")
	for _, want := range []string{
		"warning: broker options: password: secret: open /etc/etpulse/broker-password",
		"warning: broker options: tls.ca_file: open /etc/etpulse/tls/farm-ca.pem",
		"warning: store token: secret: environment variable ETPULSE_STORE_TOKEN is not set",
	} {
		assert.Contains(t, errs, want)
	}
	assert.Equal(t, 3, strings.Count(errs, "warning: "), errs)

	// With the secrets and files in place there is nothing to warn about.
	dir := t.TempDir()
	doc, err := os.ReadFile(exampleConfig)
	require.NoError(t, err)
	pw := filepath.Join(dir, "broker-password")
	require.NoError(t, os.WriteFile(pw, []byte("not-a-real-password\n"), 0o600))
	ca := filepath.Join(dir, "farm-ca.pem")
	require.NoError(t, os.WriteFile(ca, selfSignedPEM(t), 0o600))
	local := strings.NewReplacer("/etc/etpulse/broker-password", pw, "/etc/etpulse/tls/farm-ca.pem", ca).Replace(string(doc))
	f := filepath.Join(dir, "etpulse.yaml")
	require.NoError(t, os.WriteFile(f, []byte(local), 0o600))
	t.Setenv("ETPULSE_STORE_TOKEN", "not-a-real-token")
	code, _, errs = runCmd(t, "check", "--quiet", "--config", f)
	assert.Equal(t, 0, code)
	assert.Empty(t, errs)
}

// selfSignedPEM returns a throwaway self-signed CA certificate in PEM.
func selfSignedPEM(t *testing.T) []byte {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	require.NoError(t, err)
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "example check CA"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
		IsCA: true, BasicConstraintsValid: true, KeyUsage: x509.KeyUsageCertSign,
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	require.NoError(t, err)
	return pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der})
}
