package zones

import (
	"fmt"

	"go.etcd.io/bbolt"

	"etpulse/controllers"
)

// Holds returns the manual holds and rain delays stored for site (the
// site-wide hold and one per zone), for read-only views such as the status
// pages. A hold that has ended is returned too: ask Hold.Active.
func (s *Service) Holds(site string) (controllers.Holds, error) {
	var h controllers.Holds
	err := s.o.DB.View(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		h, err = loadHolds(b, site)
		return err
	})
	if err != nil {
		return h, fmt.Errorf("zones holds of site %s: %w", site, err)
	}
	return h, nil
}
