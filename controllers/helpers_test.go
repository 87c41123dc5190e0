package controllers

import "time"

// stdLoc is a station standard time 8 hours behind UTC (no daylight saving).
var stdLoc = time.FixedZone("UTC-8", -8*3600)

// maizeZone is a sprinkler-watered maize block on loam: Kc 1.2 constant
// (FAO-56 Table 12 maize grain Kc mid 1.20, from memory), TAW 130 mm, p 0.55
// (see loam). The farm figures (area, rate, limits) are invented.
func maizeZone() *Zone {
	return &Zone{
		ID: "lowmead-north", Valve: "v1", Source: "lowmead-pump", Area: 20000, Loc: stdLoc,
		Crop: Crop{Kc: 1.2},
		Soil: loam(),
		Rain: EffectiveRain{Method: RainFractionAboveThreshold, Fraction: 0.8, Threshold: 0.5},
		System: System{Kind: Sprinkler, Rate: 5, Efficiency: 0.75,
			MinMinutes: 10, MaxMinutes: 600, MaxPerDay: 720},
		Windows:  []Window{{Start: 21 * 60, End: 5 * 60}},
		Policy:   DefaultPolicy,
		FailSafe: FailSafe{MaxMissingHours: 3},
	}
}

// hourAt returns the hour starting h hours after 2026-07-01 00:00 station time.
func hourAt(h int) (time.Time, time.Time) {
	s := time.Date(2026, 7, 1, 0, 0, 0, 0, stdLoc).Add(time.Duration(h) * time.Hour)
	return s, s.Add(time.Hour)
}

func validHour(h int, et, rain float64) HourInput {
	s, e := hourAt(h)
	return HourInput{Start: s, End: e, Valid: true, ET: et, Rain: rain, Wind2: 2, AirTemp: 20, HasWind: true, HasTemp: true}
}
