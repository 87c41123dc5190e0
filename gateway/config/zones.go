package config

// Zone is one irrigation zone. Owned by the zone-control work.
type Zone struct {
	ID string `yaml:"id"`
}

func (z *Zone) setDefaults()                                  {}
func (z *Zone) validate(path string, p *Problems, site *Site) {}

// WaterSource is a water source shared by zones. Owned by the zone-control work.
type WaterSource struct {
	ID string `yaml:"id"`
}

func (w *WaterSource) setDefaults()                                  {}
func (w *WaterSource) validate(path string, p *Problems, site *Site) {}
