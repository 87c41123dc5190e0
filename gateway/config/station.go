package config

// Station is one weather station and its sensors. Owned by the live-gateway work.
type Station struct {
	ID string `yaml:"id"`
}

func (s *Station) setDefaults()                      {}
func (s *Station) validate(path string, p *Problems) {}
