package controllers

import "time"

// ChargedOn returns the minutes the zone's commands in ledger charge against
// its daily cap (System.MaxPerDay) on the zone's standard-time day of t, by
// the rule the decision function applies: planned and sent commands in
// full, failed or stopped ones by what they reported, cancelled ones and
// those that expired unsent not at all.
func (z *Zone) ChargedOn(ledger []Command, t time.Time) int {
	day := dayKey(t, z.Loc)
	n := 0
	for i := range ledger {
		c := &ledger[i]
		if c.Zone == z.ID && dayKey(c.Start, z.Loc) == day {
			n += c.chargedMinutes()
		}
	}
	return n
}
