// Package config reads and validates the gateway's YAML configuration.
//
// Loading is strict: unknown keys are errors, defaults are applied to unset
// fields, and validation collects every problem with the field path and the
// bad value (e.g. "sites[0].zones[2].system.rate_mm_h: must be > 0, got -3").
package config

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	"go.yaml.in/yaml/v3"
)

// Config is the whole gateway configuration.
type Config struct {
	// TopicPrefix is the first level (or levels, "farm/etpulse") of every
	// topic the gateway publishes or owns: <prefix>/<site>/<station>/hour,
	// <prefix>/<site>/zones/<zone>/command and report, <prefix>/<site>/hold,
	// and the alerts (unless alerts.topic_prefix differs). Default "etpulse".
	// Gateways sharing a broker keep their sites apart by site id, or by
	// prefix when site ids repeat.
	TopicPrefix string `yaml:"topic_prefix"`

	Broker Broker `yaml:"broker"`
	State  State  `yaml:"state"`
	Sites  []Site `yaml:"sites"`
	Store  Store  `yaml:"store"`
	Alerts Alerts `yaml:"alerts"`
	HTTP   HTTP   `yaml:"http"`
}

// State locates the durable state file and says how often it is written
// (state.go).
type State struct {
	// Path of the state file (bbolt). Default "etpulse.db".
	Path string `yaml:"path"`
	// Journal makes received messages durable in an append-only journal
	// beside the state file (Path + ".journal") and writes them into the
	// state file at checkpoints; false writes every batch into the state
	// file at once. Default true.
	Journal *bool `yaml:"journal"`
	// AckWindow is the longest a received message waits for others to be
	// journalled (and acknowledged) with it. Default 2s.
	AckWindow Duration `yaml:"ack_window"`
	// CheckpointEvery is the longest a journalled reading waits to be
	// written into the state file. Default 5m.
	CheckpointEvery Duration `yaml:"checkpoint_every"`
}

// Site is one farm site: its stations, irrigation zones and water sources.
// A site is owned by exactly one gateway process.
type Site struct {
	ID       string        `yaml:"id"`
	Stations []Station     `yaml:"stations"`
	Zones    []Zone        `yaml:"zones"`
	Sources  []WaterSource `yaml:"sources"`
	Meters   []Meter       `yaml:"meters"` // flow meters (meters.go)
}

// Load reads, decodes, defaults and validates the file at path.
func Load(path string) (*Config, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("load config: %w", err)
	}
	return Parse(b)
}

// Parse decodes, defaults and validates a configuration document.
func Parse(b []byte) (*Config, error) {
	var c Config
	dec := yaml.NewDecoder(bytes.NewReader(b))
	dec.KnownFields(true)
	if err := dec.Decode(&c); err != nil {
		if errors.Is(err, io.EOF) {
			return nil, fmt.Errorf("parse config: empty document")
		}
		return nil, decodeError(b, err)
	}
	if err := fractionProblems(b); err != nil {
		return nil, err
	}
	c.setDefaults()
	if err := c.Validate(); err != nil {
		return nil, err
	}
	return &c, nil
}

func (c *Config) setDefaults() {
	c.State.setDefaults()
	if c.TopicPrefix == "" {
		c.TopicPrefix = DefaultTopicPrefix
	}
	if c.Alerts.TopicPrefix == "" {
		c.Alerts.TopicPrefix = c.TopicPrefix // alert topics follow topic_prefix unless set
	}
	c.Broker.setDefaults(c)
	for i := range c.Sites {
		s := &c.Sites[i]
		for j := range s.Stations {
			s.Stations[j].setDefaults()
		}
		for j := range s.Zones {
			s.Zones[j].setDefaults()
			s.Zones[j].defaultGreenhouseStation(s)
		}
		for j := range s.Sources {
			s.Sources[j].setDefaults()
		}
	}
	c.Store.setDefaults()
	c.Alerts.setDefaults()
	c.HTTP.setDefaults()
}

// Validate checks the whole configuration and returns a *ValidationError
// listing every problem, or nil.
func (c *Config) Validate() error {
	var p Problems
	if msg := topicPrefixProblem(c.TopicPrefix); msg != "" {
		p.Addf("topic_prefix", "%s, got %q", msg, c.TopicPrefix)
	}
	c.Broker.validate("broker", &p)
	if len(c.Sites) == 0 {
		p.Add("sites", "at least one site is required")
	}
	siteIDs := map[string]bool{}
	for i := range c.Sites {
		s := &c.Sites[i]
		path := fmt.Sprintf("sites[%d]", i)
		if !validID(s.ID) {
			p.Addf(path+".id", "must be 1-64 characters of a-z, 0-9, '-' or '_', got %q", s.ID)
		} else if siteIDs[s.ID] {
			p.Addf(path+".id", "duplicate site id %q", s.ID)
		}
		siteIDs[s.ID] = true
		s.validate(path, &p)
	}
	validateTopics(c, &p)
	validateOwnTopics(c, &p)
	c.Store.validate("store", &p)
	alerts := c.Alerts
	if alerts.TopicPrefix == c.TopicPrefix {
		// Inherited from topic_prefix and checked above as such; a prefix of
		// several levels is fine there, while alerts.topic_prefix set on its
		// own is one level.
		alerts.TopicPrefix = DefaultAlertTopicPrefix
	}
	alerts.validate("alerts", &p, c)
	c.HTTP.validate("http", &p)
	c.State.validate("state", &p)
	return p.Err()
}

func (s *Site) validate(path string, p *Problems) {
	if len(s.Stations) == 0 {
		p.Add(path+".stations", "at least one station is required")
	}
	ids := map[string]bool{}
	for j := range s.Stations {
		st := &s.Stations[j]
		sp := fmt.Sprintf("%s.stations[%d]", path, j)
		if ids[st.ID] {
			p.Addf(sp+".id", "duplicate station id %q", st.ID)
		}
		ids[st.ID] = true
		st.validate(sp, p)
	}
	zoneIDs := map[string]bool{}
	for j := range s.Zones {
		z := &s.Zones[j]
		zp := fmt.Sprintf("%s.zones[%d]", path, j)
		if zoneIDs[z.ID] {
			p.Addf(zp+".id", "duplicate zone id %q", z.ID)
		}
		zoneIDs[z.ID] = true
		z.validate(zp, p, s)
	}
	for j := range s.Sources {
		s.Sources[j].validate(fmt.Sprintf("%s.sources[%d]", path, j), p, s)
	}
	s.validateMeters(path, p)
}

// StationByID returns the station with the given id, or nil.
func (s *Site) StationByID(id string) *Station {
	for i := range s.Stations {
		if s.Stations[i].ID == id {
			return &s.Stations[i]
		}
	}
	return nil
}

func validID(s string) bool {
	if len(s) == 0 || len(s) > 64 {
		return false
	}
	for _, r := range s {
		if !(r >= 'a' && r <= 'z' || r >= '0' && r <= '9' || r == '-' || r == '_') {
			return false
		}
	}
	return true
}

// Problems collects validation problems, each "path: message".
type Problems struct {
	list []string
}

// Add records a problem with the field at path.
func (p *Problems) Add(path, msg string) { p.list = append(p.list, path+": "+msg) }

// Addf records a formatted problem with the field at path.
func (p *Problems) Addf(path, format string, args ...any) {
	p.Add(path, fmt.Sprintf(format, args...))
}

// Err returns a *ValidationError holding every problem, or nil when there are none.
func (p *Problems) Err() error {
	if len(p.list) == 0 {
		return nil
	}
	return &ValidationError{Problems: append([]string(nil), p.list...)}
}

// ValidationError lists every problem found in a configuration.
type ValidationError struct {
	Problems []string
}

func (e *ValidationError) Error() string {
	return "invalid config:\n  " + strings.Join(e.Problems, "\n  ")
}

// Secret is a credential read from an environment variable or a file, never
// written inline. Its LogValue and String redact the value.
type Secret struct {
	Env  string `yaml:"env"`  // name of an environment variable holding the value
	File string `yaml:"file"` // path of a file holding the value (trailing newline trimmed)

	inline bool // the YAML held the value itself (rejected by validation; the value is not kept)
}

// UnmarshalYAML accepts a mapping with env or file. A plain string (an inline
// credential) is remembered only as a fact, not its value, so that
// validation can explain the fix without echoing the secret.
func (s *Secret) UnmarshalYAML(n *yaml.Node) error {
	switch n.Kind {
	case yaml.ScalarNode:
		if n.ShortTag() == "!!null" {
			*s = Secret{}
		} else {
			*s = Secret{inline: true}
		}
		return nil
	case yaml.MappingNode:
		var out Secret
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, v := n.Content[i], n.Content[i+1]
			var dst *string
			switch k.Value {
			case "env":
				dst = &out.Env
			case "file":
				dst = &out.File
			default:
				return valueError(k, "unknown key: a secret is {env: NAME} or {file: PATH}")
			}
			if v.Kind != yaml.ScalarNode {
				return valueError(v, "must be text, got %s", kindName(v))
			}
			*dst = v.Value
		}
		*s = out
		return nil
	}
	return valueError(n, "a secret must be {env: NAME} or {file: PATH}, got %s", kindName(n))
}

// IsSet reports whether a source is configured.
func (s Secret) IsSet() bool { return s.Env != "" || s.File != "" }

// Resolve reads the secret's value from its source.
func (s Secret) Resolve() (string, error) {
	switch {
	case s.Env != "" && s.File != "":
		return "", errors.New("secret: set either env or file, not both")
	case s.Env != "":
		v, ok := os.LookupEnv(s.Env)
		if !ok {
			return "", fmt.Errorf("secret: environment variable %s is not set", s.Env)
		}
		return v, nil
	case s.File != "":
		b, err := os.ReadFile(s.File)
		if err != nil {
			return "", fmt.Errorf("secret: %w", err)
		}
		return strings.TrimRight(string(b), "\r\n"), nil
	}
	return "", nil
}

func (s Secret) String() string {
	switch {
	case s.Env != "":
		return "env:" + s.Env + " (redacted)"
	case s.File != "":
		return "file:" + s.File + " (redacted)"
	}
	return "(none)"
}

func (s Secret) validate(path string, p *Problems) {
	if s.inline {
		p.Add(path, "must not be written inline; read it from an environment variable ({env: NAME}) or a file ({file: PATH})")
	}
	if s.Env != "" && s.File != "" {
		p.Add(path, "set either env or file, not both")
	}
}
