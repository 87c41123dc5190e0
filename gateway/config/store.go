package config

// Store configures the time-series store, the outbox and the local history.
// Owned by the store work.
type Store struct{}

func (s *Store) setDefaults()                      {}
func (s *Store) validate(path string, p *Problems) {}
