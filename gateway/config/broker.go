package config

// Broker is the MQTT broker connection. Owned by the live-gateway work.
type Broker struct{}

func (b *Broker) setDefaults()                      {}
func (b *Broker) validate(path string, p *Problems) {}
