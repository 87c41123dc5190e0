package config

import (
	"fmt"
	"math"

	"etpulse/controllers"
)

// Unit factors for the hints of the plausibility warnings.
const (
	mmPerMPerInPerFt = 25.4 / 0.3048 // 1 in/ft = 83.33 mm/m
	litresPerGallon  = 3.785411784   // US gallon
	mmPerIn          = 25.4
)

// Plausible ranges behind the warnings. Common practice, no source: they
// catch unit slips (in/ft, in/h, gph, gpm) and typing errors, not unusual
// but real systems, which is why they warn and do not refuse.
var (
	// AvailableWaterRange is the available water per metre of root depth
	// soils hold, mm/m (FAO-56 Table 19 spans roughly 50-200 mm/m from sand
	// to clay, from memory; the range is wider on purpose).
	AvailableWaterRange = [2]float64{25, 300}
	// RateRange is the application rate each system type usually gives, mm/h.
	RateRange = map[string][2]float64{"drip": {0.3, 10}, "sprinkler": {2, 25}, "micro_sprinkler": {1, 15}}
)

// Smallest flows that do not look like gallons: a drip emitter below
// 0.6 L/h is more likely a gph figure (0.5 gph = 1.9 L/h); a sprinkler
// nozzle below 4 L/min more likely gpm (3.5 gpm = 13.2 L/min). Common
// practice, no source.
const (
	MinEmitterLH  = 0.6
	MinNozzleLMin = 4.0
)

// DefaultPeakReferenceET is the peak-month reference ET, mm/day, that the
// capacity check assumes for a zone without a fallback ET table, by the
// zone's crop reference: a warm, dry summer. FAO-56 Table 2 (from memory)
// gives 4-7 mm/day for warm humid and 6-9 mm/day for warm arid temperate
// regions; 7 mm/day grass and 1.2 times that for alfalfa are common
// practice, no source. A site in another climate states its own figures
// in fail_safe.fallback_et_mm_day.
var DefaultPeakReferenceET = map[string]float64{"grass": 7, "alfalfa": 8.4}

// PeakReferenceET returns the peak-month reference ET the zone's capacity is
// judged against, mm/day, and where it comes from: the largest month of
// fail_safe.fallback_et_mm_day when the zone has one, else
// DefaultPeakReferenceET.
func (z *Zone) PeakReferenceET() (float64, string) {
	if len(z.FailSafe.FallbackETMMDay) > 0 {
		peak := 0.0
		for _, v := range z.FailSafe.FallbackETMMDay {
			peak = math.Max(peak, v)
		}
		return peak, "largest month of fail_safe.fallback_et_mm_day"
	}
	return DefaultPeakReferenceET[z.Crop.Reference], "default peak reference ET"
}

// RateSource says how the application rate was derived: given, or the
// sprinkler or drip layout with its figures.
func (z *Zone) RateSource() string {
	s := &z.System
	switch {
	case s.Sprinkler != nil:
		l := s.Sprinkler
		return fmt.Sprintf("sprinkler layout 60 x %s L/min / (%s m x %s m)", fmtF(l.NozzleLMin), fmtF(l.SpacingAlongM), fmtF(l.SpacingBetweenM))
	case s.Drip != nil:
		l := s.Drip
		return fmt.Sprintf("drip layout %d x %s L/h / %s m2", l.EmittersPerPlant, fmtF(l.EmitterLH), fmtF(l.PlantAreaM2))
	}
	return "given"
}

// Warnings lists what is valid but implausible, each "path: message" with
// the likely cause: available water, application rates and emitter or
// nozzle flows that look like another unit, and zones that cannot keep up
// with the crop in the peak month. Call it on a loaded (valid)
// configuration; `etpulse check` prints them and still exits 0.
func (c *Config) Warnings() []string {
	var p Problems
	c.placeTimeWarnings(&p)
	c.oldKeyWarnings(&p)
	for i := range c.Sites {
		s := &c.Sites[i]
		for j := range s.Zones {
			s.Zones[j].warn(fmt.Sprintf("sites[%d].zones[%d]", i, j), &p, s)
		}
	}
	return p.list
}

func (z *Zone) warn(path string, p *Problems, site *Site) {
	lo, hi := AvailableWaterRange[0], AvailableWaterRange[1]
	if aw := z.Soil.controller().TAW(1); aw < lo || aw > hi {
		field, what := path+".soil.available_water_mm_per_m", fmtF(aw)+" mm/m"
		if z.Soil.AvailableWaterMMPerM == 0 {
			field = path + ".soil"
			what = fmt.Sprintf("field_capacity %s and wilting_point %s give %s mm/m",
				fmtF(z.Soil.FieldCapacity), fmtF(z.Soil.WiltingPoint), fmtF(round2(aw)))
		}
		if aw < lo {
			p.Addf(field, "%s is below %s mm/m, less than soils hold (usual %s-%s mm/m): is it in in/ft? (%s in/ft = %s mm/m)",
				what, fmtF(lo), fmtF(lo), fmtF(hi), fmtF(round2(aw)), fmtF(round2(aw*mmPerMPerInPerFt)))
		} else if z.Soil.AvailableWaterMMPerM == 0 {
			p.Addf(field, "%s, above %s mm/m, more than soils hold (usual %s-%s mm/m): are both from the same soil analysis, as volume fractions?",
				what, fmtF(hi), fmtF(lo), fmtF(hi))
		} else {
			p.Addf(field, "%s is above %s mm/m, more than soils hold (usual %s-%s mm/m): is it the root zone's total in mm rather than per metre?",
				what, fmtF(hi), fmtF(lo), fmtF(hi))
		}
	}

	s := &z.System
	if d := s.Drip; d != nil && d.EmitterLH < MinEmitterLH {
		p.Addf(path+".system.drip.emitter_l_h", "%s L/h is below what drip emitters usually give (%s L/h and more): is it in gph? (%s gph = %s L/h)",
			fmtF(d.EmitterLH), fmtF(MinEmitterLH), fmtF(d.EmitterLH), fmtF(round2(d.EmitterLH*litresPerGallon)))
	}
	if n := s.Sprinkler; n != nil && s.Type == string(controllers.Sprinkler) && n.NozzleLMin < MinNozzleLMin {
		p.Addf(path+".system.sprinkler.nozzle_l_min", "%s L/min is below what sprinkler nozzles usually give (%s L/min and more): is it in gpm? (%s gpm = %s L/min)",
			fmtF(n.NozzleLMin), fmtF(MinNozzleLMin), fmtF(n.NozzleLMin), fmtF(round2(n.NozzleLMin*litresPerGallon)))
	}
	rate, err := z.RateMMH()
	if r, ok := RateRange[s.Type]; ok && err == nil && (rate < r[0] || rate > r[1]) {
		field, cause := path+".system.rate_mm_h", "are the layout figures and their units right?"
		switch {
		case s.Sprinkler != nil:
			field = path + ".system.sprinkler"
		case s.Drip != nil:
			field = path + ".system.drip"
		case rate < r[0]:
			cause = fmt.Sprintf("is it in in/h? (%s in/h = %s mm/h)", fmtF(rate), fmtF(round2(rate*mmPerIn)))
		default:
			cause = "is it a flow per emitter or per plant rather than mm/h over the area?"
		}
		p.Addf(field, "application rate %s mm/h (%s) is outside what %s usually gives (%s-%s mm/h): %s",
			fmtF(round2(rate)), z.RateSource(), s.Type, fmtF(r[0]), fmtF(r[1]), cause)
	}

	st := site.StationByID(z.Station)
	if st == nil {
		return
	}
	cz, err := z.Controller(st)
	if err != nil {
		return // validation reports it
	}
	ref, from := z.PeakReferenceET()
	peak := cz.PeakETc(ref)
	if minutes, net := cz.DailyCapacity(); net < peak {
		p.Addf(path+".system", "this zone cannot keep up in the peak month: it can receive %s mm/day net (%d min/day at %s mm/h x %s) but the crop may use %s mm/day (peak Kc %s x %s mm/day, %s); widen the windows, raise max_minutes or max_minutes_per_day, or check the rate",
			fmtF(round2(net)), minutes, fmtF(round2(cz.System.Rate)), fmtF(cz.System.Efficiency), fmtF(round2(peak)),
			fmtF(round2(cz.PeakKc())), fmtF(ref), from)
	}
}
