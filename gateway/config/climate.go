package config

import "fmt"

// oldKeyNote is the deprecation warning of a key read by its old name.
const oldKeyNote = "the key is now %s; the old name is read until a later release"

// setDefaults sets U2 from whichever wind key was given (none: 0). It is
// safe on a nil climate.
func (cl *ZoneClimate) setDefaults() {
	switch {
	case cl == nil:
	case cl.Wind2m != nil:
		cl.U2 = *cl.Wind2m
	case cl.OldU2 != nil:
		cl.U2 = *cl.OldU2
	}
}

// validateWind checks the climate's wind at 2 m: one key, within 0-20 m/s.
func (cl *ZoneClimate) validateWind(path string, p *Problems) {
	key := "wind_2m_m_s"
	switch {
	case cl.Wind2m != nil && cl.OldU2 != nil:
		p.Addf(path, "wind_2m_m_s and u2_m_s are the new and the old name of one key: keep wind_2m_m_s")
		return
	case cl.OldU2 != nil:
		key = "u2_m_s"
	}
	if !(cl.U2 >= 0 && cl.U2 <= 20) {
		p.Addf(path+"."+key, "must be within 0-20, got %s", fmtF(cl.U2))
	}
}

// oldKeyWarnings adds a warning for each key given by its old name.
func (c *Config) oldKeyWarnings(p *Problems) {
	for i := range c.Sites {
		for j, z := range c.Sites[i].Zones {
			if cl := z.Crop.Climate; cl != nil && cl.OldU2 != nil {
				p.Addf(fmt.Sprintf("sites[%d].zones[%d].crop.climate.u2_m_s", i, j), oldKeyNote, "wind_2m_m_s")
			}
		}
	}
}
