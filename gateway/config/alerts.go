package config

// Alerts configures sensor drift and fault checks. Owned by the alerts work.
type Alerts struct{}

func (a *Alerts) setDefaults()                                 {}
func (a *Alerts) validate(path string, p *Problems, c *Config) {}

// HTTP configures the metrics and health listener. Owned by the alerts work.
type HTTP struct{}

func (h *HTTP) setDefaults()                      {}
func (h *HTTP) validate(path string, p *Problems) {}
