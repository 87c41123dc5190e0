package config

import (
	"net/url"
	"strings"
	"time"
)

// Broker is the MQTT broker connection.
type Broker struct {
	// URL of the broker: tcp://, ssl://, tls://, ws:// or wss://.
	// Default tcp://127.0.0.1:1883 (a broker on the edge box itself).
	URL string `yaml:"url"`
	// ClientID is the stable MQTT client identifier. The broker keeps the
	// persistent session under it, so it must not change between restarts and
	// must differ between gateway processes. Default: the topic prefix (with
	// characters other than letters, digits, '-' and '_' turned into '-';
	// "etpulse" by default), "-" and the site ids joined with "-".
	ClientID string `yaml:"client_id"`
	// Username for the broker; empty for anonymous access.
	Username string `yaml:"username"`
	// Password from an environment variable or a file, never inline.
	Password Secret `yaml:"password"`
	// TLS holds certificate settings for ssl://, tls:// and wss:// URLs.
	TLS BrokerTLS `yaml:"tls"`
	// KeepAlive is the MQTT keep-alive interval. Default 30s.
	KeepAlive Duration `yaml:"keepalive"`
	// ConnectTimeout bounds one connection attempt. Default 10s.
	ConnectTimeout Duration `yaml:"connect_timeout"`
	// MaxInflight bounds the messages received but not yet handled; when it
	// is reached the client stops reading from the broker. Default 256.
	MaxInflight int `yaml:"max_inflight"`
	// MaxPayloadBytes is the largest payload decoded; larger messages are
	// rejected as too large. Default 65536.
	MaxPayloadBytes int `yaml:"max_payload_bytes"`
}

// BrokerTLS holds the certificate files of a TLS broker connection.
type BrokerTLS struct {
	CAFile             string `yaml:"ca_file"`              // PEM CA bundle; empty uses the system roots
	CertFile           string `yaml:"cert_file"`            // PEM client certificate (with key_file)
	KeyFile            string `yaml:"key_file"`             // PEM client key (with cert_file)
	InsecureSkipVerify bool   `yaml:"insecure_skip_verify"` // skip server certificate checks; testing only
}

// IsSet reports whether any TLS setting is present.
func (t BrokerTLS) IsSet() bool {
	return t.CAFile != "" || t.CertFile != "" || t.KeyFile != "" || t.InsecureSkipVerify
}

// Broker defaults and limits.
const (
	DefaultBrokerURL       = "tcp://127.0.0.1:1883"
	DefaultKeepAlive       = 30 * time.Second
	DefaultConnectTimeout  = 10 * time.Second
	DefaultMaxInflight     = 256
	DefaultMaxPayloadBytes = 64 << 10
	maxMaxPayloadBytes     = 16 << 20
	maxClientIDLen         = 128
)

// TLSScheme reports whether the broker URL's scheme uses TLS.
func (b Broker) TLSScheme() bool {
	u, err := url.Parse(b.URL)
	if err != nil {
		return false
	}
	switch u.Scheme {
	case "ssl", "tls", "wss", "mqtts":
		return true
	}
	return false
}

func (b *Broker) setDefaults(c *Config) {
	if b.URL == "" {
		b.URL = DefaultBrokerURL
	}
	if b.ClientID == "" {
		ids := make([]string, 0, len(c.Sites))
		for _, s := range c.Sites {
			if s.ID != "" {
				ids = append(ids, s.ID)
			}
		}
		b.ClientID = clientIDBase(c.TopicPrefix)
		if len(ids) > 0 {
			b.ClientID += "-" + strings.Join(ids, "-")
		}
		if len(b.ClientID) > maxClientIDLen {
			b.ClientID = b.ClientID[:maxClientIDLen]
		}
	}
	if b.KeepAlive == 0 {
		b.KeepAlive = Duration(DefaultKeepAlive)
	}
	if b.ConnectTimeout == 0 {
		b.ConnectTimeout = Duration(DefaultConnectTimeout)
	}
	if b.MaxInflight == 0 {
		b.MaxInflight = DefaultMaxInflight
	}
	if b.MaxPayloadBytes == 0 {
		b.MaxPayloadBytes = DefaultMaxPayloadBytes
	}
}

func (b *Broker) validate(path string, p *Problems) {
	u, err := url.Parse(b.URL)
	switch {
	case err != nil:
		p.Addf(path+".url", "not a URL: %q", b.URL)
	case u.Scheme != "tcp" && u.Scheme != "ssl" && u.Scheme != "tls" && u.Scheme != "ws" && u.Scheme != "wss" && u.Scheme != "mqtts":
		p.Addf(path+".url", "scheme must be tcp, ssl, tls, ws or wss, got %q", b.URL)
	case u.Host == "":
		p.Addf(path+".url", "missing host, got %q", b.URL)
	case u.User != nil:
		p.Addf(path+".url", "must not carry credentials; use username and password (env or file), got %q", u.Redacted())
	}
	if len(b.ClientID) > maxClientIDLen || strings.ContainsAny(b.ClientID, "+#/ \t\n") {
		p.Addf(path+".client_id", "must be 1-%d characters without spaces, '/', '+' or '#', got %q", maxClientIDLen, b.ClientID)
	}
	b.Password.validate(path+".password", p)
	if b.Password.IsSet() && b.Username == "" {
		p.Add(path+".username", "required when a password is set")
	}
	if b.TLS.IsSet() && err == nil && !b.TLSScheme() {
		p.Addf(path+".tls", "TLS settings need an ssl://, tls:// or wss:// url, got %q", b.URL)
	}
	if (b.TLS.CertFile == "") != (b.TLS.KeyFile == "") {
		p.Add(path+".tls", "cert_file and key_file must be set together")
	}
	if d := b.KeepAlive.D(); d < time.Second || d > 18*time.Hour {
		p.Addf(path+".keepalive", "must be between 1s and 18h, got %s", fmtDur(d))
	}
	if d := b.ConnectTimeout.D(); d < 100*time.Millisecond || d > 10*time.Minute {
		p.Addf(path+".connect_timeout", "must be between 100ms and 10m, got %s", fmtDur(d))
	}
	if b.MaxInflight < 1 || b.MaxInflight > 65535 {
		p.Addf(path+".max_inflight", "must be between 1 and 65535, got %d", b.MaxInflight)
	}
	if b.MaxPayloadBytes < 16 || b.MaxPayloadBytes > maxMaxPayloadBytes {
		p.Addf(path+".max_payload_bytes", "must be between 16 and %d, got %d", maxMaxPayloadBytes, b.MaxPayloadBytes)
	}
}
