package config

import (
	"fmt"
	"math"
	"time"

	"etpulse/controllers"
)

// Zone is one irrigation zone: the station whose ET drives it, its crop, soil,
// irrigation system, hard limits, watering windows and valve topics.
type Zone struct {
	ID      string  `yaml:"id"`
	Station string  `yaml:"station"` // station id within the site
	Valve   string  `yaml:"valve"`   // valve id on its controller; default: the zone id
	Source  string  `yaml:"source"`  // water source id; empty: not shared
	AreaM2  float64 `yaml:"area_m2"`

	Crop     ZoneCrop     `yaml:"crop"`
	Soil     ZoneSoil     `yaml:"soil"`
	Rain     ZoneRain     `yaml:"effective_rain"`
	System   ZoneSystem   `yaml:"system"`
	Windows  []string     `yaml:"windows"` // "HH:MM-HH:MM" of the station's standard time
	Holds    ZoneHolds    `yaml:"weather_holds"`
	FailSafe ZoneFailSafe `yaml:"fail_safe"`
	Commands ZoneCommands `yaml:"commands"`

	// DeficitStages are grower-named periods watered on purpose below
	// full demand; Salinity adds the leaching requirement to each run.
	DeficitStages []ZoneDeficitStage `yaml:"deficit_stages"`
	Salinity      *ZoneSalinity      `yaml:"salinity"`
	// Forecast is how the zone uses the site's forecast; absent: not at all.
	Forecast *ZoneForecast `yaml:"forecast"`
	// Probes are the zone's soil-moisture probes; absent: none.
	Probes *ZoneProbes `yaml:"probes"`
	// Greenhouse marks a zone under cover: without a station it takes the
	// site's one station with inside_greenhouse. Kc values of greenhouse
	// crops are the grower's own (no table is built in).
	Greenhouse bool `yaml:"greenhouse"`

	// CommandTopic and ReportTopic default to
	// <topic_prefix>/<site>/zones/<zone>/command and .../report.
	CommandTopic string `yaml:"command_topic"`
	ReportTopic  string `yaml:"report_topic"`
}

// ZoneCrop is the crop coefficient: a constant kc, or a season curve.
type ZoneCrop struct {
	// Reference is the reference ET the Kc values are for: "grass" (records of
	// references short and fao56) or "alfalfa" (tall). Default grass.
	Reference string      `yaml:"reference"`
	Kc        *float64    `yaml:"kc"`
	Season    *ZoneSeason `yaml:"season"`
	// Climate adjusts the season's Kc mid and Kc end (FAO-56 eq. 62, 65).
	Climate *ZoneClimate `yaml:"climate"`
	// CoverTransmission is a greenhouse cover's transmission factor (0-1]
	// applied to the reference ET of an outside station. Unset: no cover.
	CoverTransmission float64 `yaml:"cover_transmission"`
	// Canopy scales the full-cover Kc to a partial cover (Allen and
	// Pereira 2009; FAO-56 eq. 98 form). Unset: full cover.
	Canopy *ZoneCanopy `yaml:"canopy"`
}

// ZoneSeason is a Kc curve by growth stage (FAO-56 chapter 6, Fig. 25).
type ZoneSeason struct {
	Start           string   `yaml:"start"` // "MM-DD", each year
	InitialDays     int      `yaml:"initial_days"`
	DevelopmentDays int      `yaml:"development_days"`
	MidDays         int      `yaml:"mid_days"`
	LateDays        int      `yaml:"late_days"`
	KcIni           float64  `yaml:"kc_ini"`
	KcMid           float64  `yaml:"kc_mid"`
	KcEnd           float64  `yaml:"kc_end"`
	OffSeasonKc     *float64 `yaml:"off_season_kc"` // default kc_ini
}

// ZoneClimate is the mean mid/late-season climate for FAO-56 eq. 62.
type ZoneClimate struct {
	// Wind2m is the mean wind at 2 m, m/s; OldU2 the same key by its
	// name before the vocabulary (u2_m_s), read with a warning. U2 is
	// the one given (climate.go).
	Wind2m  *float64 `yaml:"wind_2m_m_s"`
	OldU2   *float64 `yaml:"u2_m_s"`
	U2      float64  `yaml:"-"`
	RHMin   float64  `yaml:"rh_min_pct"` // mean minimum relative humidity, %
	HeightM float64  `yaml:"height_m"`   // mean crop height, m
}

// ZoneSoil is the root zone.
type ZoneSoil struct {
	FieldCapacity        float64 `yaml:"field_capacity"` // m3/m3
	WiltingPoint         float64 `yaml:"wilting_point"`  // m3/m3
	AvailableWaterMMPerM float64 `yaml:"available_water_mm_per_m"`
	RootDepthM           float64 `yaml:"root_depth_m"`     // maximum (or constant) root depth
	RootDepthMinM        float64 `yaml:"root_depth_min_m"` // with a season: depth on its first day
	P                    float64 `yaml:"p"`                // FAO-56 Table 22
	AdjustP              bool    `yaml:"adjust_p"`         // Table 22 footnote
	TriggerMM            float64 `yaml:"trigger_mm"`       // explicit trigger; default RAW
	RefillFraction       float64 `yaml:"refill_fraction_of_raw"`
	InitialDepletionMM   float64 `yaml:"initial_depletion_mm"` // depletion when the zone is first seen
	// Wetted is the fraction of the soil the emitters wet; unset: all.
	Wetted *ZoneWetted `yaml:"wetted"`
}

func (s *ZoneSoil) controller() controllers.Soil {
	return controllers.Soil{
		FieldCapacity: s.FieldCapacity, WiltingPoint: s.WiltingPoint,
		AvailableWater: s.AvailableWaterMMPerM,
		RootMin:        s.RootDepthMinM, RootMax: s.RootDepthM,
		P: s.P, AdjustP: s.AdjustP, TriggerMM: s.TriggerMM, RefillFraction: s.RefillFraction,
	}
}

// ZoneRain chooses the effective rain method.
type ZoneRain struct {
	Method      string  `yaml:"method"` // all (default), none, fraction_above_threshold, fraction_above_daily_threshold
	Fraction    float64 `yaml:"fraction"`
	ThresholdMM float64 `yaml:"threshold_mm"` // per hour
}

// ZoneSystem is the irrigation system and its hard caps.
type ZoneSystem struct {
	Type      string           `yaml:"type"` // sprinkler, drip, micro_sprinkler
	RateMMH   float64          `yaml:"rate_mm_h"`
	Sprinkler *SprinklerLayout `yaml:"sprinkler"`
	Drip      *DripLayout      `yaml:"drip"`
	// Efficiency is the application efficiency (0, 1]; unset takes the
	// type's default (sprinkler 0.75, micro_sprinkler 0.85, drip 0.90), and
	// 0 written out is an error, not a default.
	Efficiency *float64 `yaml:"efficiency"`
	FlowLMin   float64  `yaml:"flow_l_min"` // default rate x area / 60

	MinMinutes       int `yaml:"min_minutes"` // default 5
	MaxMinutes       int `yaml:"max_minutes"` // required
	MaxMinutesPerDay int `yaml:"max_minutes_per_day"`
	CycleMinutes     int `yaml:"cycle_minutes"`
	SoakMinutes      int `yaml:"soak_minutes"`
}

// SprinklerLayout derives a sprinkler rate: 60 q / (Sl Sm) mm/h.
type SprinklerLayout struct {
	NozzleLMin      float64 `yaml:"nozzle_l_min"`
	SpacingAlongM   float64 `yaml:"spacing_along_m"`
	SpacingBetweenM float64 `yaml:"spacing_between_m"`
}

// DripLayout derives a drip rate: emitter flow x emitters per plant / area per plant.
type DripLayout struct {
	EmitterLH        float64 `yaml:"emitter_l_h"`
	EmittersPerPlant int     `yaml:"emitters_per_plant"`
	PlantAreaM2      float64 `yaml:"plant_area_m2"`
}

// ZoneHolds are the weather conditions that hold a zone.
type ZoneHolds struct {
	WindMaxMS    float64  `yaml:"wind_max_m_s"`  // sprinklers only; 0: off
	FrostBelowC  *float64 `yaml:"frost_below_c"` // unset: off
	RainSkipMM   float64  `yaml:"rain_skip_mm"`  // 0: off
	RainLookback Duration `yaml:"rain_lookback"` // default 6h
}

// ZoneFailSafe is what the zone does when its station produces no ET.
type ZoneFailSafe struct {
	MaxMissingHours int       `yaml:"max_missing_hours"`  // default 6
	Mode            string    `yaml:"mode"`               // hold (default) or fallback
	FallbackETMMDay []float64 `yaml:"fallback_et_mm_day"` // 12 monthly values, January first
}

// ZoneCommands is the timing of commands and retries.
type ZoneCommands struct {
	SendLead       Duration `yaml:"send_lead"`       // default 1m
	AckTimeout     Duration `yaml:"ack_timeout"`     // default 2m
	MaxAttempts    int      `yaml:"max_attempts"`    // default 3
	StartTolerance Duration `yaml:"start_tolerance"` // default 15m
	FinishGrace    Duration `yaml:"finish_grace"`    // default 15m
	// OverrunMarginPct is how far (%) a reported run may exceed the command
	// before it is alerted and its credit capped; default 10.
	OverrunMarginPct *float64 `yaml:"overrun_margin_pct"`
}

// Zone defaults.
const (
	DefaultZoneMinMinutes      = 5
	DefaultZoneMaxMissingHours = 6
	DefaultZoneRainLookback    = 6 * time.Hour
)

// DefaultEfficiency is the application efficiency used when none is set.
// Common practice, no source: typical design values of each system type.
var DefaultEfficiency = map[string]float64{"sprinkler": 0.75, "micro_sprinkler": 0.85, "drip": 0.90}

func (z *Zone) setDefaults() {
	if z.Valve == "" {
		z.Valve = z.ID
	}
	if z.Crop.Reference == "" {
		z.Crop.Reference = "grass"
	}
	z.Crop.Climate.setDefaults()
	if s := z.Crop.Season; s != nil && s.OffSeasonKc == nil {
		v := s.KcIni
		s.OffSeasonKc = &v
	}
	if z.Rain.Method == "" {
		z.Rain.Method = string(controllers.RainAll)
	}
	if z.System.Efficiency == nil {
		v := DefaultEfficiency[z.System.Type]
		z.System.Efficiency = &v
	}
	if z.System.MinMinutes == 0 {
		z.System.MinMinutes = DefaultZoneMinMinutes
	}
	if z.Holds.RainLookback == 0 {
		z.Holds.RainLookback = Duration(DefaultZoneRainLookback)
	}
	if z.FailSafe.MaxMissingHours == 0 {
		z.FailSafe.MaxMissingHours = DefaultZoneMaxMissingHours
	}
	if z.FailSafe.Mode == "" {
		z.FailSafe.Mode = "hold"
	}
	d := controllers.DefaultPolicy
	c := &z.Commands
	if c.SendLead == 0 {
		c.SendLead = Duration(d.SendLead)
	}
	if c.AckTimeout == 0 {
		c.AckTimeout = Duration(d.AckTimeout)
	}
	if c.MaxAttempts == 0 {
		c.MaxAttempts = d.MaxAttempts
	}
	if c.StartTolerance == 0 {
		c.StartTolerance = Duration(d.StartTolerance)
	}
	if c.FinishGrace == 0 {
		c.FinishGrace = Duration(d.FinishGrace)
	}
	if c.OverrunMarginPct == nil {
		v := d.OverrunMargin * 100
		c.OverrunMarginPct = &v
	}
}

// CommandTopicIn returns the zone's command topic within site: command_topic,
// or <prefix>/<site>/zones/<zone>/command.
func (z *Zone) CommandTopicIn(prefix, site string) string {
	if z.CommandTopic != "" {
		return z.CommandTopic
	}
	return ZoneCommandTopic(prefix, site, z.ID)
}

// ReportTopicIn returns the zone's report topic within site: report_topic,
// or <prefix>/<site>/zones/<zone>/report.
func (z *Zone) ReportTopicIn(prefix, site string) string {
	if z.ReportTopic != "" {
		return z.ReportTopic
	}
	return ZoneReportTopic(prefix, site, z.ID)
}

// RateMMH returns the application rate: given, or derived from the layout.
func (z *Zone) RateMMH() (float64, error) {
	s := &z.System
	switch {
	case s.Sprinkler != nil:
		return controllers.SprinklerRate(s.Sprinkler.NozzleLMin, s.Sprinkler.SpacingAlongM, s.Sprinkler.SpacingBetweenM)
	case s.Drip != nil:
		return controllers.DripRate(s.Drip.EmitterLH, s.Drip.EmittersPerPlant, s.Drip.PlantAreaM2)
	}
	return s.RateMMH, nil
}

// AcceptsReference reports whether records of reference ref drive the zone.
func (z *Zone) AcceptsReference(ref string) bool {
	if z.Crop.Reference == "alfalfa" {
		return ref == "tall"
	}
	return ref == "short" || ref == "fao56"
}

// Controller builds the zone's controllers.Zone; st is its station (for the
// standard-time offset). Call it on a validated configuration.
func (z *Zone) Controller(st *Station) (*controllers.Zone, error) {
	rate, err := z.RateMMH()
	if err != nil {
		return nil, fmt.Errorf("zone %s: %w", z.ID, err)
	}
	cz := &controllers.Zone{
		ID: z.ID, Valve: z.Valve, Source: z.Source, Area: z.AreaM2,
		Loc:   time.FixedZone(fmt.Sprintf("UTC%+g", st.UTCOffset), int(math.Round(st.UTCOffset*3600))),
		Cover: z.Crop.CoverTransmission,
		Soil:  z.Soil.controller(),
		Rain:  controllers.EffectiveRain{Method: controllers.RainMethod(z.Rain.Method), Fraction: z.Rain.Fraction, Threshold: z.Rain.ThresholdMM},
		System: controllers.System{
			Kind: controllers.SystemKind(z.System.Type), Rate: rate, Efficiency: *z.System.Efficiency, Flow: z.System.FlowLMin,
			MinMinutes: z.System.MinMinutes, MaxMinutes: z.System.MaxMinutes, MaxPerDay: z.System.MaxMinutesPerDay,
			CycleMinutes: z.System.CycleMinutes, SoakMinutes: z.System.SoakMinutes,
		},
		Holds: controllers.WeatherHolds{
			WindMax: z.Holds.WindMaxMS, RainSkipMM: z.Holds.RainSkipMM, RainLookback: z.Holds.RainLookback.D(),
		},
		Policy: controllers.CommandPolicy{
			SendLead: z.Commands.SendLead.D(), AckTimeout: z.Commands.AckTimeout.D(), MaxAttempts: z.Commands.MaxAttempts,
			StartTolerance: z.Commands.StartTolerance.D(), FinishGrace: z.Commands.FinishGrace.D(),
			OverrunMargin: *z.Commands.OverrunMarginPct / 100,
		},
		FailSafe: controllers.FailSafe{MaxMissingHours: z.FailSafe.MaxMissingHours, Fallback: z.FailSafe.Mode == "fallback"},
		Forecast: z.forecastRules(),
		Probes:   z.probeSet(),
	}
	if z.Holds.FrostBelowC != nil {
		cz.Holds.FrostC, cz.Holds.HasFrost = *z.Holds.FrostBelowC, true
	}
	copy(cz.FailSafe.FallbackET[:], z.FailSafe.FallbackETMMDay)
	if z.Crop.Kc != nil {
		cz.Crop.Kc = *z.Crop.Kc
	}
	if s := z.Crop.Season; s != nil {
		m, d, err := parseMonthDay(s.Start)
		if err != nil {
			return nil, fmt.Errorf("zone %s: season start: %w", z.ID, err)
		}
		cz.Crop.Season = &controllers.Season{StartMonth: m, StartDay: d,
			Initial: s.InitialDays, Development: s.DevelopmentDays, Mid: s.MidDays, Late: s.LateDays,
			KcIni: s.KcIni, KcMid: s.KcMid, KcEnd: s.KcEnd}
		if s.OffSeasonKc != nil {
			cz.Crop.Season.OffSeason = *s.OffSeasonKc
		}
	}
	if c := z.Crop.Climate; c != nil {
		cz.Crop.Climate = &controllers.Climate{U2: c.U2, RHMin: c.RHMin, Height: c.HeightM}
	}
	if err := z.orchardController(cz); err != nil {
		return nil, err
	}
	for _, w := range z.Windows {
		cw, err := controllers.ParseWindow(w)
		if err != nil {
			return nil, fmt.Errorf("zone %s: %w", z.ID, err)
		}
		cz.Windows = append(cz.Windows, cw)
	}
	if err := cz.Validate(); err != nil {
		return nil, err
	}
	return cz, nil
}

func parseMonthDay(s string) (time.Month, int, error) {
	t, err := time.Parse("01-02", s)
	if err != nil {
		return 0, 0, fmt.Errorf("want MM-DD, got %q", s)
	}
	return t.Month(), t.Day(), nil
}

func (z *Zone) validate(path string, p *Problems, site *Site) {
	if !validID(z.ID) {
		p.Addf(path+".id", "must be 1-64 characters of a-z, 0-9, '-' or '_', got %q", z.ID)
	}
	st := site.StationByID(z.Station)
	if st == nil && !(z.Greenhouse && z.Station == "") {
		p.Addf(path+".station", "no station %q in this site", z.Station)
	}
	if z.Source != "" && site.sourceByID(z.Source) == nil {
		p.Addf(path+".source", "no water source %q in this site", z.Source)
	}
	if !(z.AreaM2 > 0) || math.IsInf(z.AreaM2, 0) {
		p.Addf(path+".area_m2", "must be > 0, got %s", fmtF(z.AreaM2))
	}
	z.validateCrop(path+".crop", p)
	z.validateCanopy(path+".crop", p)
	z.validateSoil(path+".soil", p)
	z.validateWetted(path+".soil", p)
	z.validateDeficit(path, p)
	z.validateSalinity(path, p)
	z.validateForecast(path, p)
	z.validateProbes(path, p, site)
	z.validateGreenhouse(path, p, site)
	switch controllers.RainMethod(z.Rain.Method) {
	case controllers.RainAll, controllers.RainNone:
	case controllers.RainFractionAboveThreshold, controllers.RainFractionAboveDailyThreshold:
		if !(z.Rain.Fraction > 0 && z.Rain.Fraction <= 1) {
			p.Addf(path+".effective_rain.fraction", "must be within (0, 1], got %s", fmtF(z.Rain.Fraction))
		}
		if !(z.Rain.ThresholdMM >= 0) {
			p.Addf(path+".effective_rain.threshold_mm", "must be >= 0, got %s", fmtF(z.Rain.ThresholdMM))
		}
	default:
		p.Addf(path+".effective_rain.method", "must be one of all, none, fraction_above_threshold, fraction_above_daily_threshold, got %q", z.Rain.Method)
	}
	z.validateSystem(path+".system", p, site)
	if len(z.Windows) == 0 {
		p.Add(path+".windows", "at least one watering window is required, e.g. \"21:00-05:00\"")
	}
	for i, w := range z.Windows {
		if _, err := controllers.ParseWindow(w); err != nil {
			p.Addf(fmt.Sprintf("%s.windows[%d]", path, i), "must be HH:MM-HH:MM with different start and end, got %q", w)
		}
	}
	h := z.Holds
	if !(h.WindMaxMS >= 0) {
		p.Addf(path+".weather_holds.wind_max_m_s", "must be >= 0, got %s", fmtF(h.WindMaxMS))
	}
	if h.FrostBelowC != nil && !(*h.FrostBelowC >= -20 && *h.FrostBelowC <= 10) {
		p.Addf(path+".weather_holds.frost_below_c", "must be within -20..10 °C, got %s", fmtF(*h.FrostBelowC))
	}
	if !(h.RainSkipMM >= 0) {
		p.Addf(path+".weather_holds.rain_skip_mm", "must be >= 0, got %s", fmtF(h.RainSkipMM))
	}
	if h.RainLookback.D() < 0 || h.RainLookback.D() > controllers.KeepHours*time.Hour {
		p.Addf(path+".weather_holds.rain_lookback", "must be within 0-%dh, got %s", controllers.KeepHours, h.RainLookback)
	}
	f := z.FailSafe
	if f.MaxMissingHours < controllers.MinMissingHours || f.MaxMissingHours > controllers.MaxMissingHoursCap {
		p.Addf(path+".fail_safe.max_missing_hours", "must be within %d-%d, got %d", controllers.MinMissingHours, controllers.MaxMissingHoursCap, f.MaxMissingHours)
	}
	switch f.Mode {
	case "hold":
		if len(f.FallbackETMMDay) > 0 {
			p.Add(path+".fail_safe.fallback_et_mm_day", "set only with mode: fallback")
		}
	case "fallback":
		if len(f.FallbackETMMDay) != 12 {
			p.Addf(path+".fail_safe.fallback_et_mm_day", "mode fallback needs 12 monthly values (mm/day, January first), got %d", len(f.FallbackETMMDay))
		}
		for i, v := range f.FallbackETMMDay {
			if !(v > 0 && v <= controllers.MaxFallbackET) {
				p.Addf(fmt.Sprintf("%s.fail_safe.fallback_et_mm_day[%d]", path, i), "must be within (0, %s] mm/day, got %s", fmtF(controllers.MaxFallbackET), fmtF(v))
			}
		}
	default:
		p.Addf(path+".fail_safe.mode", "must be hold or fallback, got %q", f.Mode)
	}
	c := z.Commands
	if c.SendLead.D() < 0 || c.SendLead.D() > time.Hour {
		p.Addf(path+".commands.send_lead", "must be within 0-1h, got %s", c.SendLead)
	}
	if c.AckTimeout.D() < 10*time.Second || c.AckTimeout.D() > time.Hour {
		p.Addf(path+".commands.ack_timeout", "must be within 10s-1h, got %s", c.AckTimeout)
	}
	if c.MaxAttempts < 1 || c.MaxAttempts > controllers.MaxCommandAttempts {
		p.Addf(path+".commands.max_attempts", "must be within 1-%d, got %d", controllers.MaxCommandAttempts, c.MaxAttempts)
	}
	if c.StartTolerance.D() < time.Minute || c.StartTolerance.D() > 2*time.Hour {
		p.Addf(path+".commands.start_tolerance", "must be within 1m-2h, got %s", c.StartTolerance)
	}
	if c.FinishGrace.D() < 0 || c.FinishGrace.D() > 6*time.Hour {
		p.Addf(path+".commands.finish_grace", "must be within 0-6h, got %s", c.FinishGrace)
	}
	if m := c.OverrunMarginPct; m != nil && !(*m >= 0 && *m <= controllers.MaxOverrunMargin*100) {
		p.Addf(path+".commands.overrun_margin_pct", "must be within 0-%s (%% over the commanded minutes or volume), got %s", fmtF(controllers.MaxOverrunMargin*100), fmtF(*m))
	}
	for _, t := range []struct{ field, topic string }{{"command_topic", z.CommandTopic}, {"report_topic", z.ReportTopic}} {
		if t.topic == "" {
			continue
		}
		if msg := topicProblem(t.topic); msg != "" {
			p.Addf(path+"."+t.field, "%s, got %q", msg, t.topic)
		}
	}
	for j := range site.Zones {
		o := &site.Zones[j]
		if o == z {
			break
		}
		if o.Valve == z.Valve {
			p.Addf(path+".valve", "valve %q is already driven by zone %q", z.Valve, o.ID)
		}
	}
}

// kcRange is the crop coefficient range of controllers as the messages
// write it, "0-2".
var kcRange = fmtF(controllers.MinKc) + "-" + fmtF(controllers.MaxKc)

func (z *Zone) validateCrop(path string, p *Problems) {
	c := &z.Crop
	if c.Reference != "grass" && c.Reference != "alfalfa" {
		p.Addf(path+".reference", "must be grass or alfalfa, got %q", c.Reference)
	}
	switch {
	case c.Kc != nil && c.Season != nil:
		p.Add(path, "set either kc or season, not both")
	case c.Kc == nil && c.Season == nil:
		p.Add(path, "set kc (constant) or season (stage curve)")
	case c.Kc != nil:
		if !(*c.Kc >= controllers.MinKc && *c.Kc <= controllers.MaxKc) {
			p.Addf(path+".kc", "must be within %s, got %s", kcRange, fmtF(*c.Kc))
		}
		if c.Climate != nil {
			p.Add(path+".climate", "applies to a season curve only")
		}
	default:
		s := c.Season
		sp := path + ".season"
		if _, _, err := parseMonthDay(s.Start); err != nil {
			p.Addf(sp+".start", "must be MM-DD, got %q", s.Start)
		}
		for _, d := range []struct {
			name string
			v    int
		}{{"initial_days", s.InitialDays}, {"development_days", s.DevelopmentDays}, {"mid_days", s.MidDays}, {"late_days", s.LateDays}} {
			if d.v < 1 || d.v > controllers.MaxSeasonDays {
				p.Addf(sp+"."+d.name, "must be within 1-%d, got %d", controllers.MaxSeasonDays, d.v)
			}
		}
		if n := s.InitialDays + s.DevelopmentDays + s.MidDays + s.LateDays; n > controllers.MaxSeasonDays {
			p.Addf(sp, "season length must be <= %d days, got %d", controllers.MaxSeasonDays, n)
		}
		for _, k := range []struct {
			name string
			v    float64
		}{{"kc_ini", s.KcIni}, {"kc_mid", s.KcMid}, {"kc_end", s.KcEnd}, {"off_season_kc", *s.OffSeasonKc}} {
			if !(k.v >= controllers.MinKc && k.v <= controllers.MaxKc) {
				p.Addf(sp+"."+k.name, "must be within %s, got %s", kcRange, fmtF(k.v))
			}
		}
		if cl := c.Climate; cl != nil {
			cl.validateWind(path+".climate", p)
			if !(cl.RHMin >= 0 && cl.RHMin <= 100) {
				p.Addf(path+".climate.rh_min_pct", "must be within 0-100, got %s", fmtF(cl.RHMin))
			}
			if !(cl.HeightM > 0 && cl.HeightM <= 30) {
				p.Addf(path+".climate.height_m", "must be within (0, 30], got %s", fmtF(cl.HeightM))
			}
		}
	}
	if !(c.CoverTransmission >= 0 && c.CoverTransmission <= 1) {
		p.Addf(path+".cover_transmission", "must be within (0, 1], got %s", fmtF(c.CoverTransmission))
	}
}

func (z *Zone) validateSoil(path string, p *Problems) {
	s := &z.Soil
	before := len(p.list)
	if s.AvailableWaterMMPerM != 0 {
		if !(s.AvailableWaterMMPerM > 0 && s.AvailableWaterMMPerM <= controllers.MaxAvailableWater) {
			p.Addf(path+".available_water_mm_per_m", "must be within (0, %s], got %s", fmtF(controllers.MaxAvailableWater), fmtF(s.AvailableWaterMMPerM))
		}
		if s.FieldCapacity != 0 || s.WiltingPoint != 0 {
			p.Add(path, "set either available_water_mm_per_m or field_capacity and wilting_point, not both")
		}
	} else {
		if !(s.FieldCapacity > 0 && s.FieldCapacity <= controllers.MaxFieldCapacity) {
			p.Addf(path+".field_capacity", "must be within (0, %s] m3/m3, got %s", fmtF(controllers.MaxFieldCapacity), fmtF(s.FieldCapacity))
		}
		if !(s.WiltingPoint >= 0 && s.WiltingPoint < s.FieldCapacity) {
			p.Addf(path+".wilting_point", "must be >= 0 and below field_capacity (%s), got %s", fmtF(s.FieldCapacity), fmtF(s.WiltingPoint))
		}
	}
	if !(s.RootDepthM > 0 && s.RootDepthM <= controllers.MaxRootDepth) {
		p.Addf(path+".root_depth_m", "must be within (0, %s] m, got %s", fmtF(controllers.MaxRootDepth), fmtF(s.RootDepthM))
	}
	if !(s.RootDepthMinM >= 0 && s.RootDepthMinM <= s.RootDepthM) {
		p.Addf(path+".root_depth_min_m", "must be within 0 and root_depth_m (%s), got %s", fmtF(s.RootDepthM), fmtF(s.RootDepthMinM))
	} else if s.RootDepthMinM > 0 && z.Crop.Season == nil {
		p.Add(path+".root_depth_min_m", "root growth needs a crop season")
	}
	if !(s.P >= controllers.MinP && s.P <= controllers.MaxP) {
		p.Addf(path+".p", "must be within %s-%s (FAO-56 Table 22), got %s", fmtF(controllers.MinP), fmtF(controllers.MaxP), fmtF(s.P))
	}
	if !(s.TriggerMM >= 0) {
		p.Addf(path+".trigger_mm", "must be >= 0, got %s", fmtF(s.TriggerMM))
	}
	if !(s.RefillFraction >= 0 && s.RefillFraction < 1) {
		p.Addf(path+".refill_fraction_of_raw", "must be within [0, 1), got %s", fmtF(s.RefillFraction))
	}
	if !(s.InitialDepletionMM >= 0) {
		p.Addf(path+".initial_depletion_mm", "must be >= 0, got %s", fmtF(s.InitialDepletionMM))
	}
	if len(p.list) == before && s.TriggerMM > 0 {
		z.validateTrigger(path, p)
	}
}

// validateTrigger refuses an explicit trigger_mm the zone can never reach
// (at or above TAW, where Ks is 0 and the crop stops drawing water: FAO-56
// eq. 84) and a refill target (refill_fraction_of_raw x RAW) not below the
// trigger, where a run would stop at once. TAW changes with the root depth
// over a season: the trigger must stay below the smallest TAW, and the
// target below the trigger at the largest RAW (largest TAW, and with
// adjust_p the largest p the FAO-56 Table 22 footnote gives, at ETc 0).
func (z *Zone) validateTrigger(path string, p *Problems) {
	s := &z.Soil
	cz := controllers.Zone{Soil: s.controller()}
	cz.Soil.WettedFraction = z.wettedFraction()
	if z.Crop.Season != nil {
		cz.Crop.Season = &controllers.Season{}
	}
	lo, hi := cz.TAWRange()
	if s.TriggerMM >= lo {
		const why = "the crop stops drawing water (Ks 0) before the depletion reaches the trigger, so the zone would never be watered; lower trigger_mm or leave it unset to trigger at RAW"
		if lo < hi {
			p.Addf(path+".trigger_mm", "must be below TAW at the shallowest roots of the season, %s mm (root_depth_min_m %s m; %s mm at root_depth_m %s m), got %s: %s",
				fmtF(round2(lo)), fmtF(s.RootDepthMinM), fmtF(round2(hi)), fmtF(s.RootDepthM), fmtF(s.TriggerMM), why)
		} else {
			p.Addf(path+".trigger_mm", "must be below TAW, %s mm (root_depth_m %s m), got %s: %s",
				fmtF(round2(hi)), fmtF(s.RootDepthM), fmtF(s.TriggerMM), why)
		}
		return
	}
	pmax := s.P
	if s.AdjustP {
		pmax = math.Min(controllers.MaxP, s.P+0.04*5) // FAO-56 Table 22 footnote at ETc 0
	}
	raw := controllers.RAW(pmax, hi) // FAO-56 eq. 83
	if target := s.RefillFraction * raw; target >= s.TriggerMM {
		p.Addf(path+".refill_fraction_of_raw", "%s puts the refill target at %s mm (%s x RAW %s mm at root_depth_m %s m, p %s), not below trigger_mm %s: every run would stop at or above the trigger, so the zone would hardly be watered; use a refill_fraction_of_raw below %s or raise trigger_mm",
			fmtF(s.RefillFraction), fmtF(round2(target)), fmtF(s.RefillFraction), fmtF(round2(raw)), fmtF(s.RootDepthM), fmtF(pmax),
			fmtF(s.TriggerMM), fmtF(math.Floor(s.TriggerMM/raw*100)/100))
	}
}

func round2(v float64) float64 { return math.Round(v*100) / 100 }

func (z *Zone) validateSystem(path string, p *Problems, site *Site) {
	s := &z.System
	switch controllers.SystemKind(s.Type) {
	case controllers.Sprinkler, controllers.Drip, controllers.MicroSprinkler:
	default:
		p.Addf(path+".type", "must be one of sprinkler, drip, micro_sprinkler, got %q", s.Type)
	}
	n := 0
	for _, set := range []bool{s.RateMMH != 0, s.Sprinkler != nil, s.Drip != nil} {
		if set {
			n++
		}
	}
	if n != 1 {
		p.Add(path, "set exactly one of rate_mm_h, sprinkler or drip")
	}
	rate, err := z.RateMMH()
	switch {
	case err != nil:
		p.Addf(path, "%v", err)
	case n == 1 && !(rate > 0 && rate <= controllers.MaxRate):
		p.Addf(path+".rate_mm_h", "must be within (0, %s], got %s", fmtF(controllers.MaxRate), fmtF(rate))
	}
	switch e := *s.Efficiency; {
	case e == 0 && DefaultEfficiency[s.Type] > 0:
		p.Addf(path+".efficiency", "must be within (0, %s], got 0: 0 would mean no water ever reaches the roots; remove the key to use the %s default %s, or set the measured efficiency",
			fmtF(controllers.MaxEfficiency), s.Type, fmtF(DefaultEfficiency[s.Type]))
	case !(e > 0 && e <= controllers.MaxEfficiency):
		p.Addf(path+".efficiency", "must be within (0, %s], got %s", fmtF(controllers.MaxEfficiency), fmtF(e))
	}
	if !(s.FlowLMin >= 0) || math.IsInf(s.FlowLMin, 0) {
		p.Addf(path+".flow_l_min", "must be >= 0, got %s", fmtF(s.FlowLMin))
	}
	const lo, hi = controllers.MinRunMinutes, controllers.MaxRunMinutes
	if s.MinMinutes < lo || s.MinMinutes > hi {
		p.Addf(path+".min_minutes", "must be within %d-%d, got %d", lo, hi, s.MinMinutes)
	}
	if s.MaxMinutes < s.MinMinutes || s.MaxMinutes > hi {
		p.Addf(path+".max_minutes", "required hard cap: must be within min_minutes (%d) and %d, got %d", s.MinMinutes, hi, s.MaxMinutes)
	}
	if s.MaxMinutesPerDay < s.MinMinutes || s.MaxMinutesPerDay > hi {
		p.Addf(path+".max_minutes_per_day", "required hard cap: must be within min_minutes (%d) and %d, got %d", s.MinMinutes, hi, s.MaxMinutesPerDay)
	}
	if s.CycleMinutes < 0 || s.CycleMinutes > hi {
		p.Addf(path+".cycle_minutes", "must be within 0-%d, got %d", hi, s.CycleMinutes)
	} else if s.CycleMinutes > 0 && s.MinMinutes > s.CycleMinutes/2 {
		p.Addf(path+".cycle_minutes", "must be at least twice min_minutes (%d) so no cycle falls below it, got %d", s.MinMinutes, s.CycleMinutes)
	}
	if s.SoakMinutes < 0 || s.SoakMinutes > hi {
		p.Addf(path+".soak_minutes", "must be within 0-%d, got %d", hi, s.SoakMinutes)
	} else if s.CycleMinutes > 0 && s.SoakMinutes == 0 {
		p.Add(path+".soak_minutes", "required (>= 1) with cycle_minutes")
	}
	if src := site.sourceByID(z.Source); src != nil && src.MaxFlowLMin > 0 && err == nil && z.AreaM2 > 0 {
		flow := s.FlowLMin
		if flow == 0 {
			flow = rate * z.AreaM2 / 60
		}
		if flow > src.MaxFlowLMin {
			p.Addf(path+".flow_l_min", "zone flow %.0f L/min exceeds source %q max_flow_l_min %s", flow, src.ID, fmtF(src.MaxFlowLMin))
		}
	}
}

// WaterSource is a water source shared by zones (a well, a pump, a main):
// it limits how many valves run at once and their total flow.
type WaterSource struct {
	ID          string  `yaml:"id"`
	MaxValves   int     `yaml:"max_valves"`     // 0: no limit
	MaxFlowLMin float64 `yaml:"max_flow_l_min"` // 0: no limit
}

// Controller returns the source for the controllers.
func (w *WaterSource) Controller() controllers.Source {
	return controllers.Source{ID: w.ID, MaxValves: w.MaxValves, MaxFlow: w.MaxFlowLMin}
}

func (w *WaterSource) setDefaults() {}

func (w *WaterSource) validate(path string, p *Problems, site *Site) {
	if !validID(w.ID) {
		p.Addf(path+".id", "must be 1-64 characters of a-z, 0-9, '-' or '_', got %q", w.ID)
	}
	for j := range site.Sources {
		o := &site.Sources[j]
		if o == w {
			break
		}
		if o.ID == w.ID {
			p.Addf(path+".id", "duplicate source id %q", w.ID)
		}
	}
	if w.MaxValves < 0 || w.MaxValves > 1000 {
		p.Addf(path+".max_valves", "must be within 0-1000 (0: no limit), got %d", w.MaxValves)
	}
	if !(w.MaxFlowLMin >= 0) || math.IsInf(w.MaxFlowLMin, 0) {
		p.Addf(path+".max_flow_l_min", "must be >= 0 (0: no limit), got %s", fmtF(w.MaxFlowLMin))
	}
}

func (s *Site) sourceByID(id string) *WaterSource {
	for i := range s.Sources {
		if s.Sources[i].ID == id {
			return &s.Sources[i]
		}
	}
	return nil
}
