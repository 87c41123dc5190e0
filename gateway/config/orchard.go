package config

import (
	"fmt"
	"math"
	"strings"
	"time"

	"etpulse/controllers"
)

// ZoneCanopy is a partial ground cover: the crop's full-cover Kc (kc or
// season) is scaled by the density coefficient of Allen and Pereira (2009),
// the form of FAO-56 eq. 98. Set cover (constant) or cover_by_date.
type ZoneCanopy struct {
	Cover       *float64        `yaml:"cover"`         // fraction of ground shaded near noon, (0, 1]
	CoverByDate []ZoneCoverDate `yaml:"cover_by_date"` // a seasonal curve, dates increasing
	HeightM     float64         `yaml:"height_m"`      // mean crop height, m
	ML          float64         `yaml:"ml"`            // default 2 (FAO-56 eq. 98)
	KcSoil      *float64        `yaml:"kc_soil"`       // bare soil between plants, default 0.15
}

// ZoneCoverDate is the ground cover on one date of each year.
type ZoneCoverDate struct {
	Date  string  `yaml:"date"` // MM-DD
	Cover float64 `yaml:"cover"`
}

// ZoneWetted is the fraction of the soil the emitters wet: give fraction,
// or typical (FAO-56 Table 20 by system type), or emitter_diameter_m (with
// a drip layout: emitters x π d²/4 / plant area).
type ZoneWetted struct {
	Fraction         *float64 `yaml:"fraction"`
	Typical          bool     `yaml:"typical"`
	EmitterDiameterM float64  `yaml:"emitter_diameter_m"`
}

// ZoneDeficitStage is a grower-named period of regulated deficit: a
// management-allowed depletion (mad, fraction of TAW) replacing the
// trigger, and/or a fraction of the crop ET a run puts back.
type ZoneDeficitStage struct {
	Name            string  `yaml:"name"`
	From            string  `yaml:"from"` // MM-DD
	To              string  `yaml:"to"`   // MM-DD, may be before from (over the new year)
	MAD             float64 `yaml:"mad"`
	ReplaceFraction float64 `yaml:"replace_fraction"`
}

// ZoneSalinity is the irrigation water's salinity and the crop's threshold
// (FAO-29, Ayers and Westcot 1985, Table 4), from which the leaching
// requirement added to each run follows.
type ZoneSalinity struct {
	WaterECdSm     float64  `yaml:"water_ec_ds_m"`
	ThresholdECdSm float64  `yaml:"threshold_ec_ds_m"`
	FreshUpToDSm   *float64 `yaml:"fresh_up_to_ds_m"` // default 0.7 (FAO-29 Table 1)
}

// wettedFraction returns the zone's wetted fraction, 0 when not set (the
// whole soil) or not derivable.
func (z *Zone) wettedFraction() float64 {
	w := z.Soil.Wetted
	switch {
	case w == nil:
		return 0
	case w.Fraction != nil:
		return *w.Fraction
	case w.Typical:
		return controllers.TypicalWettedFraction[controllers.SystemKind(z.System.Type)]
	case w.EmitterDiameterM > 0 && z.System.Drip != nil:
		d := z.System.Drip
		f, err := controllers.EmitterWettedFraction(d.EmittersPerPlant, w.EmitterDiameterM, d.PlantAreaM2)
		if err != nil {
			return 0
		}
		return f
	}
	return 0
}

func (z *Zone) validateWetted(path string, p *Problems) {
	w := z.Soil.Wetted
	if w == nil {
		return
	}
	path += ".wetted"
	n := 0
	for _, set := range []bool{w.Fraction != nil, w.Typical, w.EmitterDiameterM != 0} {
		if set {
			n++
		}
	}
	switch {
	case n != 1:
		p.Add(path, "set exactly one of fraction, typical or emitter_diameter_m")
	case w.Fraction != nil && !(*w.Fraction > 0 && *w.Fraction <= 1):
		p.Addf(path+".fraction", "must be within (0, 1] (FAO-56 Table 20: drip 0.3-0.4), got %s", fmtF(*w.Fraction))
	case w.Typical && controllers.TypicalWettedFraction[controllers.SystemKind(z.System.Type)] == 0:
		p.Addf(path+".typical", "FAO-56 Table 20 gives no typical value for system type %q; set fraction (the share of the ground the emitters wet)", z.System.Type)
	case w.EmitterDiameterM != 0 && z.System.Drip == nil:
		p.Add(path+".emitter_diameter_m", "needs system.drip (emitters per plant and plant area); or set fraction")
	case w.EmitterDiameterM != 0 && !(w.EmitterDiameterM > 0 && w.EmitterDiameterM <= 10):
		p.Addf(path+".emitter_diameter_m", "must be within (0, 10] m, got %s", fmtF(w.EmitterDiameterM))
	}
}

func (z *Zone) validateCanopy(path string, p *Problems) {
	c := z.Crop.Canopy
	if c == nil {
		return
	}
	path += ".canopy"
	switch {
	case (c.Cover == nil) == (len(c.CoverByDate) == 0):
		p.Add(path, "set either cover (a constant fraction) or cover_by_date")
	case c.Cover != nil && !(*c.Cover > 0 && *c.Cover <= 1):
		p.Addf(path+".cover", "must be within (0, 1] (fraction of the ground shaded near noon), got %s", fmtF(*c.Cover))
	}
	for i, d := range c.CoverByDate {
		ip := fmt.Sprintf("%s.cover_by_date[%d]", path, i)
		if _, _, err := parseMonthDay(d.Date); err != nil {
			p.Addf(ip+".date", "must be MM-DD, got %q", d.Date)
		}
		if !(d.Cover > 0 && d.Cover <= 1) {
			p.Addf(ip+".cover", "must be within (0, 1], got %s", fmtF(d.Cover))
		}
	}
	if !(c.HeightM > 0 && c.HeightM <= controllers.MaxCropHeight) {
		p.Addf(path+".height_m", "required: the mean crop height, within (0, %s] m, got %s", fmtF(controllers.MaxCropHeight), fmtF(c.HeightM))
	}
	if c.ML != 0 && !(c.ML >= controllers.MinML && c.ML <= controllers.MaxML) {
		p.Addf(path+".ml", "must be within %s-%s (Allen and Pereira 2009: 1.5-2.0), got %s", fmtF(controllers.MinML), fmtF(controllers.MaxML), fmtF(c.ML))
	}
	if c.KcSoil != nil && !(*c.KcSoil >= 0 && *c.KcSoil <= 1) {
		p.Addf(path+".kc_soil", "must be within 0-1 (FAO-56 Kc min 0.15-0.20), got %s", fmtF(*c.KcSoil))
	}
}

func (z *Zone) validateDeficit(path string, p *Problems) {
	for i, d := range z.DeficitStages {
		ip := fmt.Sprintf("%s.deficit_stages[%d]", path, i)
		if d.Name == "" {
			p.Add(ip+".name", "required: the grower's name for the stage, e.g. pit-hardening")
		}
		for j := 0; j < i; j++ {
			if d.Name != "" && z.DeficitStages[j].Name == d.Name {
				p.Addf(ip+".name", "duplicate stage name %q", d.Name)
			}
		}
		for _, f := range []struct{ key, v string }{{"from", d.From}, {"to", d.To}} {
			if _, _, err := parseMonthDay(f.v); err != nil {
				p.Addf(ip+"."+f.key, "must be MM-DD, got %q", f.v)
			}
		}
		switch {
		case d.MAD == 0 && d.ReplaceFraction == 0:
			p.Add(ip, "set mad (fraction of TAW depleted before watering) or replace_fraction (share of the crop ET put back), or both")
		case d.MAD != 0 && !(d.MAD >= controllers.MinP && d.MAD <= controllers.MaxMAD):
			p.Addf(ip+".mad", "must be within %s-%s (fraction of TAW), got %s", fmtF(controllers.MinP), fmtF(controllers.MaxMAD), fmtF(d.MAD))
		case d.ReplaceFraction != 0 && !(d.ReplaceFraction > 0 && d.ReplaceFraction <= 1):
			p.Addf(ip+".replace_fraction", "must be within (0, 1] (share of the crop ET a run puts back), got %s", fmtF(d.ReplaceFraction))
		}
	}
}

func (d ZoneDeficitStage) controller() (controllers.DeficitStage, error) {
	fm, fd, err := parseMonthDay(d.From)
	if err != nil {
		return controllers.DeficitStage{}, fmt.Errorf("from: %w", err)
	}
	tm, td, err := parseMonthDay(d.To)
	if err != nil {
		return controllers.DeficitStage{}, fmt.Errorf("to: %w", err)
	}
	return controllers.DeficitStage{Name: d.Name, FromMonth: fm, FromDay: fd, ToMonth: tm, ToDay: td, MAD: d.MAD, Replace: d.ReplaceFraction}, nil
}

func (z *Zone) salinity() controllers.Salinity {
	s := z.Salinity
	if s == nil {
		return controllers.Salinity{}
	}
	out := controllers.Salinity{ECw: s.WaterECdSm, ECe: s.ThresholdECdSm, FreshUpTo: controllers.DefaultFreshUpTo}
	if s.FreshUpToDSm != nil {
		out.FreshUpTo = *s.FreshUpToDSm
	}
	return out
}

func (z *Zone) validateSalinity(path string, p *Problems) {
	if z.Salinity == nil {
		return
	}
	path += ".salinity"
	s := z.salinity()
	switch {
	case !(s.ECw > 0 && s.ECw <= controllers.MaxEC):
		p.Addf(path+".water_ec_ds_m", "required: the irrigation water's EC, within (0, %s] dS/m, got %s", fmtF(controllers.MaxEC), fmtF(s.ECw))
	case !(s.ECe > 0 && s.ECe <= controllers.MaxEC):
		p.Addf(path+".threshold_ec_ds_m", "required: the crop's threshold soil EC (FAO-29 Table 4), within (0, %s] dS/m, got %s", fmtF(controllers.MaxEC), fmtF(s.ECe))
	case !(s.FreshUpTo >= 0 && s.FreshUpTo <= controllers.MaxEC):
		p.Addf(path+".fresh_up_to_ds_m", "must be within 0-%s dS/m, got %s", fmtF(controllers.MaxEC), fmtF(s.FreshUpTo))
	default:
		if lr := s.LeachingRequirement(); lr < 0 || lr > controllers.MaxLeaching {
			p.Addf(path+".water_ec_ds_m", "%s dS/m against the crop's threshold %s dS/m needs more than %s of each run to leach (LR = ECw / (5 ECe - ECw), FAO-29): the water is too salty for this crop; check the units (dS/m) or blend with fresher water",
				fmtF(s.ECw), fmtF(s.ECe), fmtF(controllers.MaxLeaching))
		}
	}
}

// defaultGreenhouseStation gives a greenhouse zone without a station the
// site's one station inside a greenhouse, so its ET is the inside
// reference (no cover factor needed).
func (z *Zone) defaultGreenhouseStation(site *Site) {
	if !z.Greenhouse || z.Station != "" {
		return
	}
	inside := insideStations(site)
	if len(inside) == 1 {
		z.Station = inside[0]
	}
}

func (z *Zone) validateGreenhouse(path string, p *Problems, site *Site) {
	if !z.Greenhouse {
		return
	}
	if z.Station == "" {
		inside := insideStations(site)
		if len(inside) == 0 {
			p.Add(path+".station", "a greenhouse zone without a station needs one station with inside_greenhouse: true in the site; set station (an outside one with crop.cover_transmission) or add the inside station")
		} else {
			p.Addf(path+".station", "the site has %d stations inside a greenhouse (%s): name the one for this zone", len(inside), strings.Join(inside, ", "))
		}
		return
	}
	if st := site.StationByID(z.Station); st != nil && st.InsideGreenhouse && z.Crop.CoverTransmission != 0 {
		p.Addf(path+".crop.cover_transmission", "station %q stands inside the greenhouse: its reference ET is already the inside one; remove cover_transmission (it would scale the ET twice)", z.Station)
	}
}

// orchardController fills the partial-cover, wetting, deficit and salinity
// parts of cz (call on a validated configuration).
func (z *Zone) orchardController(cz *controllers.Zone) error {
	if c := z.Crop.Canopy; c != nil {
		cc := &controllers.Canopy{Height: c.HeightM, ML: c.ML, KcSoil: controllers.DefaultKcSoil}
		if c.KcSoil != nil {
			cc.KcSoil = *c.KcSoil
		}
		if c.Cover != nil {
			cc.Cover = []controllers.CoverPoint{{Month: 1, Day: 1, Fc: *c.Cover}}
		}
		for _, d := range c.CoverByDate {
			m, day, err := parseMonthDay(d.Date)
			if err != nil {
				return fmt.Errorf("zone %s: canopy cover date: %w", z.ID, err)
			}
			cc.Cover = append(cc.Cover, controllers.CoverPoint{Month: m, Day: day, Fc: d.Cover})
		}
		cz.Crop.Canopy = cc
	}
	cz.Soil.WettedFraction = z.wettedFraction()
	for _, d := range z.DeficitStages {
		cd, err := d.controller()
		if err != nil {
			return fmt.Errorf("zone %s: deficit stage %s: %w", z.ID, d.Name, err)
		}
		cz.Stages = append(cz.Stages, cd)
	}
	cz.Salinity = z.salinity()
	return nil
}

// insideStations lists the ids of the site's stations inside a greenhouse.
func insideStations(site *Site) []string {
	var inside []string
	for i := range site.Stations {
		if site.Stations[i].InsideGreenhouse {
			inside = append(inside, site.Stations[i].ID)
		}
	}
	return inside
}

// orchardSummary prints the derived numbers of the partial-cover, wetting,
// deficit, salinity and greenhouse settings, when any is set.
func orchardSummary(ew *errWriter, z *Zone, cz *controllers.Zone, s *Site) {
	if z.Greenhouse {
		how := "outside station scaled by cover_transmission"
		if st := s.StationByID(z.Station); st != nil && st.InsideGreenhouse {
			how = "the inside station's reference ET"
		}
		ew.printf("    greenhouse: %s (station %s); Kc is the grower's own figure for the crop under cover\n", how, z.Station)
	}
	if cz.Crop.Canopy != nil {
		ew.printf("    partial cover (Allen and Pereira 2009 density coefficient, FAO-56 eq. 98 form; height %s m, ML %s, Kc soil %s): %s\n",
			fmtF(cz.Crop.Canopy.Height), fmtF(orDefault(cz.Crop.Canopy.ML, controllers.DefaultML)), fmtF(cz.Crop.Canopy.KcSoil), stageKcs(cz))
	}
	if fw := cz.Soil.WettedFraction; fw > 0 {
		how := "given"
		switch w := z.Soil.Wetted; {
		case w.Typical:
			how = "FAO-56 Table 20 typical for " + z.System.Type + ", from memory"
		case w.EmitterDiameterM > 0:
			how = fmt.Sprintf("%d emitters x %s m wetted circles over %s m2", z.System.Drip.EmittersPerPlant, fmtF(w.EmitterDiameterM), fmtF(z.System.Drip.PlantAreaM2))
		}
		ew.printf("    wetted fraction %s (%s): TAW, RAW and the refill above are of the wetted soil, over the whole area; in the wetted strip a run's depth is %s times deeper\n",
			fmtF(round2(fw)), how, fmtF(round2(1/fw)))
	}
	for _, d := range cz.Stages {
		var parts []string
		if d.MAD > 0 {
			parts = append(parts, fmt.Sprintf("trigger at mad %s x TAW", fmtF(d.MAD)))
		}
		if d.Replace > 0 {
			parts = append(parts, fmt.Sprintf("each run puts back %s %% of the crop ET since the last run (intended deficit %s %%)", fmtF(d.Replace*100), fmtF(round2((1-d.Replace)*100))))
		}
		ew.printf("    deficit stage %s %02d-%02d to %02d-%02d: %s; its stress is reported as intended\n",
			d.Name, d.FromMonth, d.FromDay, d.ToMonth, d.ToDay, strings.Join(parts, ", "))
	}
	if z.Salinity != nil {
		sal := cz.Salinity
		if lr := sal.LeachingRequirement(); lr > 0 {
			ew.printf("    salinity: water %s dS/m, crop threshold %s dS/m: leaching fraction %s (FAO-29 LR = ECw / (5 ECe - ECw)), each run x %s, the extra drains below the roots\n",
				fmtF(sal.ECw), fmtF(sal.ECe), fmtF(math.Round(lr*1000)/1000), fmtF(round2(1/(1-lr))))
		} else {
			ew.printf("    salinity: water %s dS/m is fresh (at or below %s dS/m): no leaching added\n", fmtF(sal.ECw), fmtF(sal.FreshUpTo))
		}
	}
}

// stageKcs names the effective Kc in the middle of each season stage (or
// the constant Kc) as full-cover -> partial-cover.
func stageKcs(cz *controllers.Zone) string {
	se := cz.Crop.Season
	if se == nil {
		t := time.Date(2025, 7, 1, 12, 0, 0, 0, cz.Loc)
		return fmt.Sprintf("Kc %s -> %s (cover %s, Kd %s)", fmtF(round2(cz.Crop.FullKcOn(t))), fmtF(round2(cz.Crop.KcOn(t))),
			fmtF(round2(cz.Crop.Canopy.CoverOn(t))), fmtF(round2(cz.Crop.Canopy.Kd(t))))
	}
	start := time.Date(2025, se.StartMonth, se.StartDay, 12, 0, 0, 0, cz.Loc)
	var parts []string
	for _, st := range []struct {
		name string
		day  int
	}{{"initial", se.Initial / 2}, {"development", se.Initial + se.Development/2}, {"mid", se.Initial + se.Development + se.Mid/2}, {"end", se.Length() - 1}} {
		t := start.AddDate(0, 0, st.day)
		parts = append(parts, fmt.Sprintf("%s %s -> %s (cover %s)", st.name, fmtF(round2(cz.Crop.FullKcOn(t))), fmtF(round2(cz.Crop.KcOn(t))), fmtF(round2(cz.Crop.Canopy.CoverOn(t)))))
	}
	return "Kc " + strings.Join(parts, ", ")
}

func orDefault(v, d float64) float64 {
	if v == 0 {
		return d
	}
	return v
}

// StageOn returns the deficit stage in force on the calendar date of t (t
// in the zone's standard time), or nil.
func (z *Zone) StageOn(t time.Time) *controllers.DeficitStage {
	for _, d := range z.DeficitStages {
		cd, err := d.controller()
		if err == nil && cd.In(t) {
			return &cd
		}
	}
	return nil
}
