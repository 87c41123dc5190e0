package mqtt

import (
	"crypto/tls"
	"crypto/x509"
	"fmt"
	"os"

	"etpulse/gateway/config"
)

// OptionsFromConfig turns the broker configuration into Options: it reads the
// password from its environment variable or file and loads the TLS files.
// Logger, Registerer and OnConnectionChange are left for the caller.
func OptionsFromConfig(b config.Broker) (Options, error) {
	o := Options{
		URL:            b.URL,
		ClientID:       b.ClientID,
		Username:       b.Username,
		KeepAlive:      b.KeepAlive.D(),
		ConnectTimeout: b.ConnectTimeout.D(),
		MaxInflight:    b.MaxInflight,
	}
	if b.Password.IsSet() {
		pw, err := b.Password.Resolve()
		if err != nil {
			return Options{}, fmt.Errorf("broker options: password: %w", err)
		}
		o.Password = pw
	}
	if b.TLSScheme() || b.TLS.IsSet() {
		tc, err := tlsConfig(b.TLS)
		if err != nil {
			return Options{}, fmt.Errorf("broker options: %w", err)
		}
		o.TLS = tc
	}
	return o, nil
}

func tlsConfig(t config.BrokerTLS) (*tls.Config, error) {
	tc := &tls.Config{MinVersion: tls.VersionTLS12, InsecureSkipVerify: t.InsecureSkipVerify} //nolint:gosec // opt-in, documented as testing only
	if t.CAFile != "" {
		pem, err := os.ReadFile(t.CAFile)
		if err != nil {
			return nil, fmt.Errorf("tls.ca_file: %w", err)
		}
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(pem) {
			return nil, fmt.Errorf("tls.ca_file %s: no PEM certificate found", t.CAFile)
		}
		tc.RootCAs = pool
	}
	if t.CertFile != "" || t.KeyFile != "" {
		cert, err := tls.LoadX509KeyPair(t.CertFile, t.KeyFile)
		if err != nil {
			return nil, fmt.Errorf("tls.cert_file/key_file: %w", err)
		}
		tc.Certificates = []tls.Certificate{cert}
	}
	return tc, nil
}
