package config

import (
	"time"

	"go.yaml.in/yaml/v3"
)

// Duration is a time.Duration written in YAML as a Go duration string
// ("90s", "15m", "2h").
type Duration time.Duration

// UnmarshalYAML decodes a duration string. A bad value is reported with its
// position, which Parse turns into the field's path.
func (d *Duration) UnmarshalYAML(n *yaml.Node) error {
	if n.Kind != yaml.ScalarNode {
		return valueError(n, "must be a duration like \"15m\", got %s", kindName(n))
	}
	v, err := time.ParseDuration(n.Value)
	if err != nil {
		return valueError(n, "invalid duration %q: write a number with a unit (ns, us, ms, s, m, h), e.g. \"90s\", \"15m\" or \"2h30m\"", n.Value)
	}
	*d = Duration(v)
	return nil
}

// MarshalYAML encodes the duration as a string.
func (d Duration) MarshalYAML() (any, error) { return time.Duration(d).String(), nil }

// D returns the value as a time.Duration.
func (d Duration) D() time.Duration { return time.Duration(d) }

func (d Duration) String() string { return time.Duration(d).String() }
