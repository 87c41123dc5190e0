// Package promreg registers a component's Prometheus collectors with an
// injected prometheus.Registerer, the one way every gateway package does it.
package promreg

import (
	"errors"
	"fmt"
	"regexp"

	"github.com/prometheus/client_golang/prometheus"
)

// Register registers every collector with reg; a nil reg registers nothing
// (a component built without metrics). Collectors that fail do not stop the
// others; the failures come back as one error prefixed
// "register <part> metrics:" that names each failing metric, and wraps the
// registry's errors (prometheus.AlreadyRegisteredError for a clash).
func Register(reg prometheus.Registerer, part string, cs ...prometheus.Collector) error {
	if reg == nil {
		return nil
	}
	var errs []error
	for _, c := range cs {
		if err := reg.Register(c); err != nil {
			errs = append(errs, fmt.Errorf("%s: %w", names(c), err))
		}
	}
	if err := errors.Join(errs...); err != nil {
		return fmt.Errorf("register %s metrics: %w (is a second %s registered with the same registry?)", part, err, part)
	}
	return nil
}

// Shared registers c with reg, or returns the collector of the same kind
// already registered under its name, so that several instances of a
// component in one process (two MQTT clients) count into one series. A nil
// reg returns c unregistered.
func Shared[C prometheus.Collector](reg prometheus.Registerer, part string, c C) (C, error) {
	if reg == nil {
		return c, nil
	}
	err := reg.Register(c)
	if err == nil {
		return c, nil
	}
	var are prometheus.AlreadyRegisteredError
	if errors.As(err, &are) {
		if existing, ok := are.ExistingCollector.(C); ok {
			return existing, nil
		}
	}
	return c, fmt.Errorf("register %s metrics: %s: %w", part, names(c), err)
}

var fqName = regexp.MustCompile(`fqName: "([^"]*)"`)

// names lists the quoted metric names c describes, for error messages.
func names(c prometheus.Collector) string {
	ch := make(chan *prometheus.Desc)
	go func() {
		c.Describe(ch)
		close(ch)
	}()
	var out string
	for d := range ch {
		name := d.String()
		if m := fqName.FindStringSubmatch(name); m != nil {
			name = fmt.Sprintf("%q", m[1])
		}
		if out != "" {
			out += ", "
		}
		out += name
	}
	return out
}
