// Package state opens the gateway's durable state file.
//
// The file is one bbolt database. Each component owns its own top-level
// buckets (named after the component, e.g. "bins/...", "outbox", "zones/...")
// and takes a *bbolt.Tx where its change must commit atomically with another
// component's: an hour that closes, its outbox points and the zone balance
// step it drives are one transaction.
package state

import (
	"fmt"
	"time"

	"go.etcd.io/bbolt"
)

// Open opens (creating if needed) the state file at path. It fails after a
// few seconds rather than waiting forever when another process holds it.
func Open(path string) (*bbolt.DB, error) {
	db, err := bbolt.Open(path, 0o600, &bbolt.Options{Timeout: 5 * time.Second})
	if err != nil {
		return nil, fmt.Errorf("open state %s: %w", path, err)
	}
	return db, nil
}
