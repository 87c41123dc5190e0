package config

import (
	"fmt"
	"strings"

	"etpulse/controllers"
	"etpulse/hourly"
)

// ZoneProbes are a zone's soil-moisture probes: channels of the zone's
// station (quantity soil_water or soil_tension) placed at stated depths.
// Absent: the zone's balance is the model alone.
type ZoneProbes struct {
	Sensors []ZoneProbe `yaml:"sensors"`
	// Texture names a Carsel and Parrish (1988) texture class ("loam",
	// "sandy loam", ...) whose retention curve converts tension to water
	// content; Retention gives the curve's parameters instead.
	Texture   string         `yaml:"texture"`
	Retention *ZoneRetention `yaml:"retention"`
	// ProbeSDMM is the uncertainty (standard deviation) of the probes'
	// depletion estimate, mm (default 5); ModelUncertainty the model's per
	// mm of water it moves (default 0.5).
	ProbeSDMM        *float64 `yaml:"probe_sd_mm"`
	ModelUncertainty *float64 `yaml:"model_uncertainty"`
	// FreshHours: older readings are not used (default 3).
	FreshHours int `yaml:"fresh_hours"`
	// DisagreeMMPerDay and DisagreeDays: alert when the probes correct the
	// model by more than this in a day, one way, this many days in a row
	// (defaults 1.5 mm and 3 days).
	DisagreeMMPerDay *float64 `yaml:"disagree_mm_per_day"`
	DisagreeDays     int      `yaml:"disagree_days"`
	// StuckHours and StuckChange: alert when a reading moves by no more
	// than StuckChange (% or kPa) for StuckHours while the crop uses at
	// least 5 mm (defaults 48 h and 0.2).
	StuckHours  int      `yaml:"stuck_hours"`
	StuckChange *float64 `yaml:"stuck_change"`
	// ResponseHours: after a run of at least ResponseMinMM net, the
	// shallowest probe must get wetter within this time (defaults 12 h, 5 mm).
	ResponseHours int      `yaml:"response_hours"`
	ResponseMinMM *float64 `yaml:"response_min_mm"`
}

// ZoneProbe is one probe: a channel name of the zone's station (the sensor
// id, or "<sensor>.<key>" for a field or SenML record) and its depth.
type ZoneProbe struct {
	Sensor string  `yaml:"sensor"`
	DepthM float64 `yaml:"depth_m"`
}

// ZoneRetention is a van Genuchten (1980) retention curve.
type ZoneRetention struct {
	ThetaR      float64 `yaml:"theta_r"`
	ThetaS      float64 `yaml:"theta_s"`
	AlphaPerKPa float64 `yaml:"alpha_per_kpa"`
	N           float64 `yaml:"n"`
}

// The defaults of a zone's probes (common practice, no source).
const (
	DefaultProbeSDMM        = 5.0
	DefaultModelUncertainty = 0.5
	DefaultProbeFreshHours  = 3
	DefaultDisagreeMMPerDay = 1.5
	DefaultDisagreeDays     = 3
	DefaultStuckHours       = 48
	DefaultStuckChange      = 0.2
	DefaultStuckETcMM       = 5.0
	DefaultResponseHours    = 12
	DefaultResponseMinMM    = 5.0
)

func orInt(v, def int) int {
	if v == 0 {
		return def
	}
	return v
}

// probeSet converts the zone's probe keys, with their defaults (nil: no
// probes).
func (z *Zone) probeSet() *controllers.ProbeSet {
	pc := z.Probes
	if pc == nil {
		return nil
	}
	ps := &controllers.ProbeSet{
		ProbeSD: orFloat(pc.ProbeSDMM, DefaultProbeSDMM), ModelRel: orFloat(pc.ModelUncertainty, DefaultModelUncertainty),
		FreshHours: orInt(pc.FreshHours, DefaultProbeFreshHours),
		DisagreeMM: orFloat(pc.DisagreeMMPerDay, DefaultDisagreeMMPerDay), DisagreeDays: orInt(pc.DisagreeDays, DefaultDisagreeDays),
		StuckHours: orInt(pc.StuckHours, DefaultStuckHours), StuckDelta: orFloat(pc.StuckChange, DefaultStuckChange), StuckETcMM: DefaultStuckETcMM,
		ResponseHours: orInt(pc.ResponseHours, DefaultResponseHours), ResponseMM: orFloat(pc.ResponseMinMM, DefaultResponseMinMM),
	}
	for _, s := range pc.Sensors {
		ps.Probes = append(ps.Probes, controllers.Probe{ID: s.Sensor, Depth: s.DepthM})
	}
	if r := pc.Retention; r != nil {
		ps.Retention = &controllers.Retention{ThetaR: r.ThetaR, ThetaS: r.ThetaS, Alpha: r.AlphaPerKPa, N: r.N}
	} else if r, ok := controllers.Texture(pc.Texture); ok {
		ps.Retention = &r
	}
	return ps
}

// probeChannels returns the station's soil-moisture channels by name.
func probeChannels(st *Station) map[string]hourly.Quantity {
	out := map[string]hourly.Quantity{}
	if st == nil {
		return out
	}
	for i := range st.Sensors {
		sn := &st.Sensors[i]
		for k, c := range sn.Channels() {
			if c.Quantity == hourly.SoilWater || c.Quantity == hourly.SoilTension {
				out[sn.ChannelName(k)] = c.Quantity
			}
		}
	}
	return out
}

func (z *Zone) validateProbes(path string, p *Problems, site *Site) {
	pc := z.Probes
	if pc == nil {
		return
	}
	path += ".probes"
	if pc.Texture != "" && pc.Retention != nil {
		p.Addf(path, "give texture or retention, not both")
	}
	if _, ok := controllers.Texture(pc.Texture); pc.Texture != "" && !ok {
		p.Addf(path+".texture", "must be one of %s, got %q", strings.Join(controllers.Textures(), ", "), pc.Texture)
	}
	chans := probeChannels(site.StationByID(z.Station))
	tension := false
	for i, s := range pc.Sensors {
		q, ok := chans[s.Sensor]
		if !ok {
			p.Addf(fmt.Sprintf("%s.sensors[%d].sensor", path, i), "no channel %q of quantity soil_water or soil_tension on station %q", s.Sensor, z.Station)
		}
		tension = tension || q == hourly.SoilTension
	}
	ps := z.probeSet()
	if tension && ps.Retention == nil {
		p.Addf(path, "a soil_tension probe needs texture or retention to convert tension to water content")
	}
	if err := ps.Validate(z.Soil.controller()); err != nil {
		p.Addf(path, "%s", strings.TrimSuffix(err.Error(), ": "+controllers.ErrInput.Error()))
	}
}
