package config

import (
	"net/url"
	"time"
)

// Store configures the time-series store (InfluxDB v2 write API), the
// durable outbox in the state file and the local history. With an empty URL
// there is no server: the local history is the only destination.
type Store struct {
	// URL is the base URL of a server that accepts the InfluxDB v2 write
	// API, e.g. http://127.0.0.1:8086. Empty: local history only.
	URL string `yaml:"url"`
	// Org and Bucket name the destination (required with a URL; servers
	// that ignore them, like victoria-metrics, still need a value).
	Org    string `yaml:"org"`
	Bucket string `yaml:"bucket"`
	// Token is the API token, from an environment variable or a file.
	Token Secret `yaml:"token"`
	// BatchSize is the number of points per write request. Default 500.
	BatchSize int `yaml:"batch_size"`
	// FlushInterval is how long new points wait to be batched. Default 1s.
	FlushInterval Duration `yaml:"flush_interval"`
	// MaxBackoff caps the exponential delay between retries. Default 5m.
	MaxBackoff Duration `yaml:"max_backoff"`
	// BackfillRate bounds how fast a backlog drains after an outage, in
	// points per second; live points are exempt. Default 1000.
	BackfillRate float64 `yaml:"backfill_rate"`
	// OutboxCap is the outbox size, in points, above which the oldest raw
	// summaries are dropped (other points are never dropped). Default 200000.
	OutboxCap int `yaml:"outbox_cap"`
	// RawSummaries also writes per-quantity hourly summaries of the raw
	// readings (measurement et_raw). Default false.
	RawSummaries bool `yaml:"raw_summaries"`
	// HistoryRetention is how long the local history keeps points. Default
	// 8784h (366 days).
	HistoryRetention Duration `yaml:"history_retention"`
	// ServerRetention is the server's retention period: older points are
	// quarantined instead of being sent (a server may accept and silently
	// drop them). 0, the default, means no limit.
	ServerRetention Duration `yaml:"server_retention"`
}

// Defaults of the store section, kept equal to those of gateway/store.
const (
	DefaultStoreBatchSize     = 500
	DefaultStoreFlushInterval = time.Second
	DefaultStoreMaxBackoff    = 5 * time.Minute
	DefaultStoreBackfillRate  = 1000
	DefaultStoreOutboxCap     = 200_000
	DefaultHistoryRetention   = 366 * 24 * time.Hour
)

// Local reports whether no server is configured (local history only).
func (s *Store) Local() bool { return s.URL == "" }

func (s *Store) setDefaults() {
	if s.BatchSize == 0 {
		s.BatchSize = DefaultStoreBatchSize
	}
	if s.FlushInterval == 0 {
		s.FlushInterval = Duration(DefaultStoreFlushInterval)
	}
	if s.MaxBackoff == 0 {
		s.MaxBackoff = Duration(DefaultStoreMaxBackoff)
	}
	if s.BackfillRate == 0 {
		s.BackfillRate = DefaultStoreBackfillRate
	}
	if s.OutboxCap == 0 {
		s.OutboxCap = DefaultStoreOutboxCap
	}
	if s.HistoryRetention == 0 {
		s.HistoryRetention = Duration(DefaultHistoryRetention)
	}
}

func (s *Store) validate(path string, p *Problems) {
	if s.URL != "" {
		u, err := url.Parse(s.URL)
		switch {
		case err != nil:
			p.Addf(path+".url", "not a URL: %q", s.URL)
		case u.Scheme != "http" && u.Scheme != "https":
			p.Addf(path+".url", "scheme must be http or https, got %q", s.URL)
		case u.Host == "":
			p.Addf(path+".url", "missing host, got %q", s.URL)
		case u.User != nil:
			p.Add(path+".url", "must not hold credentials; use token.env or token.file")
		}
		if s.Org == "" {
			p.Add(path+".org", "required when url is set")
		}
		if s.Bucket == "" {
			p.Add(path+".bucket", "required when url is set")
		}
	} else if s.Token.IsSet() {
		p.Add(path+".token", "set but url is empty (no server to send it to)")
	}
	s.Token.validate(path+".token", p)
	if s.BatchSize < 1 || s.BatchSize > 50_000 {
		p.Addf(path+".batch_size", "must be 1-50000, got %d", s.BatchSize)
	}
	if s.FlushInterval < 0 || s.FlushInterval.D() > time.Hour {
		p.Addf(path+".flush_interval", "must be 0s-1h, got %s", s.FlushInterval)
	}
	if s.MaxBackoff.D() < time.Second || s.MaxBackoff.D() > 24*time.Hour {
		p.Addf(path+".max_backoff", "must be 1s-24h, got %s", s.MaxBackoff)
	}
	if !(s.BackfillRate > 0) {
		p.Addf(path+".backfill_rate", "must be > 0 points/s, got %g", s.BackfillRate)
	}
	if s.OutboxCap < 100 {
		p.Addf(path+".outbox_cap", "must be >= 100 points, got %d", s.OutboxCap)
	}
	if s.HistoryRetention.D() < time.Hour {
		p.Addf(path+".history_retention", "must be >= 1h, got %s", s.HistoryRetention)
	}
	if s.ServerRetention < 0 {
		p.Addf(path+".server_retention", "must be >= 0, got %s", s.ServerRetention)
	} else if s.ServerRetention > 0 && s.ServerRetention.D() < time.Hour {
		p.Addf(path+".server_retention", "must be 0 (no limit) or >= 1h, got %s", s.ServerRetention)
	}
}
