package testenv

import (
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"fmt"
	"math/big"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// PKI is a throwaway certificate set written to a test's temporary
// directory: a CA, a server certificate for 127.0.0.1 (IP SAN) and a client
// certificate signed by it, and an unrelated second CA for the wrong-CA case.
// Every file is PEM.
type PKI struct {
	CAFile      string // the CA that signed the server and client certificates
	ServerCert  string // server certificate, IP SAN 127.0.0.1
	ServerKey   string
	ClientCert  string // client certificate (client authentication), CN etpulse-test-client
	ClientKey   string
	OtherCAFile string // a CA that signed nothing here
}

// NewPKI generates a PKI in t.TempDir(). The files are world-readable: the
// keys are throwaway, and a broker started as root may read them after
// dropping to its own user.
func NewPKI(t testing.TB) *PKI {
	t.Helper()
	dir := t.TempDir()
	p := &PKI{
		CAFile:      filepath.Join(dir, "ca.pem"),
		ServerCert:  filepath.Join(dir, "server.pem"),
		ServerKey:   filepath.Join(dir, "server-key.pem"),
		ClientCert:  filepath.Join(dir, "client.pem"),
		ClientKey:   filepath.Join(dir, "client-key.pem"),
		OtherCAFile: filepath.Join(dir, "other-ca.pem"),
	}
	now := time.Now()
	ca, caKey := newCert(t, nil, nil, &x509.Certificate{
		Subject:               pkix.Name{CommonName: "etpulse test CA"},
		NotBefore:             now.Add(-time.Hour),
		NotAfter:              now.Add(24 * time.Hour),
		IsCA:                  true,
		BasicConstraintsValid: true,
		KeyUsage:              x509.KeyUsageCertSign | x509.KeyUsageCRLSign,
	}, p.CAFile, "")
	leaf := func(cn string, usage x509.ExtKeyUsage) *x509.Certificate {
		return &x509.Certificate{
			Subject:     pkix.Name{CommonName: cn},
			NotBefore:   now.Add(-time.Hour),
			NotAfter:    now.Add(24 * time.Hour),
			KeyUsage:    x509.KeyUsageDigitalSignature,
			ExtKeyUsage: []x509.ExtKeyUsage{usage},
		}
	}
	server := leaf("127.0.0.1", x509.ExtKeyUsageServerAuth)
	server.IPAddresses = []net.IP{net.ParseIP("127.0.0.1")}
	newCert(t, ca, caKey, server, p.ServerCert, p.ServerKey)
	newCert(t, ca, caKey, leaf("etpulse-test-client", x509.ExtKeyUsageClientAuth), p.ClientCert, p.ClientKey)
	newCert(t, nil, nil, &x509.Certificate{
		Subject:               pkix.Name{CommonName: "unrelated test CA"},
		NotBefore:             now.Add(-time.Hour),
		NotAfter:              now.Add(24 * time.Hour),
		IsCA:                  true,
		BasicConstraintsValid: true,
		KeyUsage:              x509.KeyUsageCertSign,
	}, p.OtherCAFile, "")
	return p
}

// newCert creates tmpl with a fresh P-256 key, signed by parent (self-signed
// when parent is nil), and writes the certificate (and the key, when keyFile
// is set).
func newCert(t testing.TB, parent *x509.Certificate, parentKey *ecdsa.PrivateKey, tmpl *x509.Certificate, certFile, keyFile string) (*x509.Certificate, *ecdsa.PrivateKey) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatalf("testenv: generate key: %v", err)
	}
	serial, err := rand.Int(rand.Reader, new(big.Int).Lsh(big.NewInt(1), 62))
	if err != nil {
		t.Fatalf("testenv: serial: %v", err)
	}
	tmpl.SerialNumber = serial
	if parent == nil {
		parent, parentKey = tmpl, key
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, parent, &key.PublicKey, parentKey)
	if err != nil {
		t.Fatalf("testenv: create certificate %s: %v", tmpl.Subject.CommonName, err)
	}
	cert, err := x509.ParseCertificate(der)
	if err != nil {
		t.Fatalf("testenv: parse certificate: %v", err)
	}
	writePEM(t, certFile, "CERTIFICATE", der)
	if keyFile != "" {
		kb, err := x509.MarshalPKCS8PrivateKey(key)
		if err != nil {
			t.Fatalf("testenv: marshal key: %v", err)
		}
		writePEM(t, keyFile, "PRIVATE KEY", kb)
	}
	return cert, key
}

func writePEM(t testing.TB, path, typ string, der []byte) {
	t.Helper()
	if err := os.WriteFile(path, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o644); err != nil {
		t.Fatalf("testenv: write %s: %v", path, err)
	}
}

// NewMosquittoTLS starts a private mosquitto whose only listener speaks TLS
// with the PKI's server certificate; with requireClientCert, clients must
// present a certificate signed by the PKI's CA. extra is appended to the
// configuration (e.g. a password_file). Broker.URL is ssl://127.0.0.1:PORT.
func NewMosquittoTLS(t testing.TB, p *PKI, requireClientCert bool, extra string) *Broker {
	t.Helper()
	conf := fmt.Sprintf("cafile %s\ncertfile %s\nkeyfile %s\ntls_version tlsv1.2\n", p.CAFile, p.ServerCert, p.ServerKey)
	if requireClientCert {
		conf += "require_certificate true\n"
	}
	b := newMosquitto(t, false, conf+extra)
	b.URL = strings.Replace(b.URL, "tcp://", "ssl://", 1)
	return b
}

// PasswordFile writes a mosquitto password file with one user, using the
// mosquitto_passwd tool installed beside the broker. Without the tool the
// test is skipped, or fails under ETPULSE_TEST_SERVERS=required.
func PasswordFile(t testing.TB, user, password string) string {
	t.Helper()
	bin := Mosquitto(t)
	tool := ""
	for _, c := range []string{
		filepath.Join(filepath.Dir(bin), "mosquitto_passwd"),
		filepath.Join(filepath.Dir(bin), "..", "bin", "mosquitto_passwd"),
	} {
		if _, err := os.Stat(c); err == nil {
			tool = c
			break
		}
	}
	if tool == "" {
		if p, err := exec.LookPath("mosquitto_passwd"); err == nil {
			tool = p
		}
	}
	if tool == "" {
		if os.Getenv("ETPULSE_TEST_SERVERS") == "required" {
			t.Fatalf("testenv: mosquitto_passwd is required but not installed beside %s or on PATH", bin)
		}
		t.Skip("mosquitto_passwd not installed")
	}
	path := filepath.Join(t.TempDir(), "passwd")
	if out, err := exec.Command(tool, "-c", "-b", path, user, password).CombinedOutput(); err != nil {
		t.Fatalf("testenv: mosquitto_passwd: %v: %s", err, out)
	}
	// Readable to the broker's own user, should it drop privileges.
	if err := os.Chmod(path, 0o644); err != nil {
		t.Fatalf("testenv: chmod password file: %v", err)
	}
	return path
}
