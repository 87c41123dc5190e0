package config

import (
	"fmt"
	"net"
	"slices"
	"strconv"
	"time"

	"etpulse/hourly"
)

// Alerts configures the sensor drift and fault checks, the alert lifecycle
// and where alerts are published. Every threshold has a default (see
// DefaultQuantityChecks and the Default* constants); the YAML only needs the
// values that differ.
type Alerts struct {
	// Disabled turns every check off.
	Disabled bool `yaml:"disabled"`
	// TopicPrefix is the prefix of the alert topics
	// <prefix>/<site>/alerts/<station>/<sensor>/<quantity>/<kind>. Default:
	// the configuration's topic_prefix; set here, it is one topic level.
	TopicPrefix string `yaml:"topic_prefix"`
	// UpdateEvery limits how often an active alert whose evidence changes is
	// re-published. Default 15m.
	UpdateEvery Duration `yaml:"update_every"`
	// ClearAfter is how long a reading-level fault (range, spike, RH above
	// saturation, dew point above air temperature) must stay absent before its
	// alert clears. Default 30m.
	ClearAfter Duration `yaml:"clear_after"`
	// Quantities overrides the per-quantity limits; unset fields keep their
	// defaults.
	Quantities map[hourly.Quantity]QuantityChecks `yaml:"quantities"`
	// RHTolerance is how far above 100 % a relative humidity reading may go
	// before it is a fault, in %. Default 2. (Ingest rejects readings above
	// 103 % outright; this check catches the band below that.)
	RHTolerance *float64 `yaml:"rh_tolerance_pct"`
	// DewTolerance is how far a dew point may exceed the air temperature
	// measured at the same time, in °C. Default 1.
	DewTolerance *float64 `yaml:"dew_tolerance_c"`
	// NightSolar configures the night-time pyranometer offset check.
	NightSolar NightSolar `yaml:"night_solar"`
	// SolarEnvelope configures the clear-sky envelope check of radiation.
	SolarEnvelope SolarEnvelope `yaml:"solar_envelope"`
	// HumidityDrift configures the nightly saturation check (opt-in per
	// station, see Stations).
	HumidityDrift HumidityDrift `yaml:"humidity_drift"`
	// Calm configures the daytime calm-run check of wind.
	Calm Calm `yaml:"calm_wind"`
	// Neighbours configures the comparison of a station with the median of
	// the other opted-in stations of its site.
	Neighbours Neighbours `yaml:"neighbours"`
	// Stations holds per-station choices: opt-ins and the response to an
	// alert per sensor quantity.
	Stations []StationAlerts `yaml:"stations"`
}

// Response is what the gateway does with a quantity while it has an active
// alert.
type Response string

// The responses to an alerted sensor.
const (
	// RespondKeep keeps using the readings; the hour is flagged.
	RespondKeep Response = "keep"
	// RespondExclude drops the readings from the hour and uses the documented
	// fallback (solar: Hargreaves-Samani, FAO-56 eq. 50); the hour is flagged.
	RespondExclude Response = "exclude"
	// RespondStop emits the station's hours without ET while the alert lasts.
	RespondStop Response = "stop"
)

// QuantityChecks are the reading-level limits of one quantity. A nil field
// takes the default; zero turns a spike, stuck or silence check off.
type QuantityChecks struct {
	Min            *float64  `yaml:"min"`              // lowest plausible value, canonical unit
	Max            *float64  `yaml:"max"`              // highest plausible value, canonical unit
	SpikePerMinute *float64  `yaml:"spike_per_minute"` // largest plausible change per minute; 0 = off
	StuckHours     *int      `yaml:"stuck_hours"`      // hours without change that make a stuck sensor; 0 = off
	StuckTolerance *float64  `yaml:"stuck_tolerance"`  // changes up to this count as "no change"
	Silence        *Duration `yaml:"silence"`          // no reading for this long is a fault; 0 = off
	Response       Response  `yaml:"response"`         // keep | exclude | stop
}

// Limits is the resolved form of QuantityChecks, with every default applied.
type Limits struct {
	Min, Max       float64
	SpikePerMinute float64
	StuckHours     int
	StuckTolerance float64
	Silence        time.Duration
	Response       Response
}

// NightSolar configures the night-time radiation offset check.
type NightSolar struct {
	// LimitWm2 is the largest plausible mean irradiance of a dark hour, W m-2.
	// Default 10.
	LimitWm2 *float64 `yaml:"limit_w_m2"`
	// Hours is how many consecutive dark hours above the limit raise the
	// alert. Default 3.
	Hours int `yaml:"hours"`
	// DarkBelowRad is the sun elevation at mid-hour (rad) below which an hour
	// counts as dark (after civil twilight). Default -0.1.
	DarkBelowRad *float64 `yaml:"dark_below_rad"`
}

// SolarEnvelope configures the comparison of measured radiation with the
// clear-sky envelope Rso over a window of days.
type SolarEnvelope struct {
	// Days is the window length. Default 7.
	Days int `yaml:"days"`
	// LowRatio: a largest daily Rs/Rso below this (with clear days in the
	// window) means a low-reading or soiled sensor. Default 0.85.
	LowRatio *float64 `yaml:"low_ratio"`
	// HighRatio: a daily Rs/Rso above this means a high-reading sensor or a
	// wrong unit. Default 1.10.
	HighRatio *float64 `yaml:"high_ratio"`
	// Margin is the hysteresis: an alert clears only when the ratio is back
	// by this much inside the limit. Default 0.03.
	Margin *float64 `yaml:"margin"`
	// MinClearDays is how many clear-looking days the window needs before a
	// low envelope is believed. Default 2.
	MinClearDays int `yaml:"min_clear_days"`
	// ClearSpread is the largest spread (coefficient of variation) of the
	// hourly Rs/Rso of a day, with the sun above 0.3 rad, that makes the day
	// look clear. Default 0.08.
	ClearSpread *float64 `yaml:"clear_spread"`
}

// HumidityDrift configures the nightly saturation check.
type HumidityDrift struct {
	// Nights is how many consecutive nights without saturation raise the
	// alert. Default 5.
	Nights int `yaml:"nights"`
	// RHBelow: a night whose largest RH stays below this (%) did not reach
	// saturation. Default 90.
	RHBelow *float64 `yaml:"rh_below_pct"`
	// DewGap: when > 0, a night whose smallest air temperature minus dew
	// point stays above this (°C) also did not reach saturation. Default 0 (off).
	DewGap *float64 `yaml:"dew_gap_c"`
}

// Calm configures the daytime calm-run check.
type Calm struct {
	// Speed is the largest wind (m/s, sensor height) that counts as calm. Default 0.5.
	Speed *float64 `yaml:"speed_m_s"`
	// DaytimeHours is how many consecutive daytime hours of calm raise the
	// alert; night hours neither count nor break the run. Default 12.
	DaytimeHours int `yaml:"daytime_hours"`
}

// Neighbours configures the comparison between stations of one site.
type Neighbours struct {
	// Days of consecutive departure that raise the alert. Default 3.
	Days int `yaml:"days"`
	// MinStations is how many opted-in stations (this one included) must have
	// data for a day to be compared. Default 3.
	MinStations int `yaml:"min_stations"`
	// Tolerance of the daily value against the others' median, per quantity:
	// air_temp °C, rel_humidity %, wind m/s, solar as a fraction of the median
	// daily total. Defaults 2, 10, 1.5, 0.15.
	Tolerance map[hourly.Quantity]float64 `yaml:"tolerance"`
}

// StationAlerts holds one station's alert choices.
type StationAlerts struct {
	// Site of the station; may be empty when the station id is unique.
	Site string `yaml:"site"`
	// Station id.
	Station string `yaml:"station"`
	// HumidityDrift opts the station into the nightly saturation check; leave
	// it off for arid sites and seasons that never saturate.
	HumidityDrift bool `yaml:"humidity_drift"`
	// Neighbours opts the station into the comparison with the other
	// opted-in stations of its site.
	Neighbours bool `yaml:"neighbours"`
	// Respond overrides the response per quantity for this station.
	Respond map[hourly.Quantity]Response `yaml:"respond"`
}

// Defaults of the alert settings (common practice, no source, unless a
// source is named beside the value).
const (
	DefaultAlertTopicPrefix  = "etpulse"
	DefaultAlertUpdateEvery  = 15 * time.Minute
	DefaultAlertClearAfter   = 30 * time.Minute
	DefaultRHTolerance       = 2.0  // %, the usual ±2 % accuracy of capacitive RH sensors (from memory)
	DefaultDewTolerance      = 1.0  // °C
	DefaultNightSolarLimit   = 10.0 // W m-2; thermopile night offsets are a few W m-2, mostly negative (from memory)
	DefaultNightSolarHours   = 3
	DefaultDarkBelowRad      = -0.1 // rad, about -6°, the end of civil twilight
	DefaultEnvelopeDays      = 7
	DefaultEnvelopeLow       = 0.85 // clear days reach Rs/Rso ≈ 0.9-1.0 (ASCE-EWRI 2005 Appendix D approach, from memory)
	DefaultEnvelopeHigh      = 1.10
	DefaultEnvelopeMargin    = 0.03
	DefaultMinClearDays      = 2
	DefaultClearSpread       = 0.08
	DefaultDriftNights       = 5
	DefaultDriftRHBelow      = 90.0 // % (ASCE-EWRI 2005 Appendix D: humid nights reach 100 %, from memory)
	DefaultCalmSpeed         = 0.5  // m/s, about the starting threshold of a cup anemometer
	DefaultCalmDaytimeHours  = 12
	DefaultNeighbourDays     = 3
	DefaultNeighbourStations = 3
)

// DefaultNeighbourTolerance is the default departure allowed from the
// others' median per quantity (common practice, no source).
func DefaultNeighbourTolerance() map[hourly.Quantity]float64 {
	return map[hourly.Quantity]float64{
		hourly.AirTemp:     2.0,  // °C, daily mean
		hourly.RelHumidity: 10,   // %, daily mean
		hourly.Wind:        1.5,  // m/s, daily mean
		hourly.Solar:       0.15, // fraction of the median daily total
	}
}

// DefaultLimits returns the default reading-level limits of q (common
// practice, no source, except where a source is named). The spike limits
// are of the size of the step tests for successive one-minute values in
// WMO guidance on quality control of automatic weather station data (air
// temperature about 3 °C, relative humidity about 10 %, wind about 20 m/s:
// from memory); relative humidity is set looser, at 15 %, because cheap
// sensors lag and then jump when wetted.
func DefaultLimits(q hourly.Quantity) Limits {
	l := Limits{Silence: 15 * time.Minute, Response: RespondKeep}
	switch q {
	case hourly.AirTemp:
		// Plausible farm air temperatures; the highest recorded is ~57 °C (from memory).
		l.Min, l.Max, l.SpikePerMinute, l.StuckHours, l.StuckTolerance = -40, 55, 3, 4, 0.001
	case hourly.RelHumidity:
		// Above 100 % is the RH check's job (RHTolerance); fog can hold RH flat for hours.
		l.Min, l.Max, l.SpikePerMinute, l.StuckHours, l.StuckTolerance = 0, 110, 15, 12, 0.001
	case hourly.DewPoint:
		// The highest dew points recorded are ~35 °C (from memory).
		l.Min, l.Max, l.SpikePerMinute, l.StuckHours, l.StuckTolerance = -50, 35, 3, 6, 0.001
	case hourly.VapourPressure:
		// es(35 °C) = 5.62 kPa (FAO-56 eq. 11).
		l.Min, l.Max, l.SpikePerMinute, l.StuckHours, l.StuckTolerance = 0, 6, 0.5, 6, 0.0001
	case hourly.Wind:
		// Stuck counts daytime hours only; gusts make large one-minute changes.
		l.Min, l.Max, l.SpikePerMinute, l.StuckHours, l.StuckTolerance = 0, 60, 20, 6, 0.001
	case hourly.Solar:
		// Solar constant 1367 W m-2 (FAO-56 eq. 21 uses Gsc 0.0820 MJ m-2 min-1);
		// brief cloud enhancement can exceed it at the ground. Clouds change
		// irradiance by hundreds of W m-2 within seconds: no spike limit.
		l.Min, l.Max, l.SpikePerMinute, l.StuckHours, l.StuckTolerance = -10, 1500, 0, 3, 0.01
	case hourly.NetRad:
		l.Min, l.Max, l.SpikePerMinute, l.StuckHours, l.StuckTolerance = -250, 1100, 0, 3, 0.01
	case hourly.SoilHeat:
		l.Min, l.Max, l.SpikePerMinute, l.StuckHours, l.StuckTolerance = -250, 450, 0, 0, 0.01
	case hourly.Rain:
		// Gauges in tip or event mode report only while it rains: no stuck or silence check.
		l.Min, l.Max, l.SpikePerMinute, l.StuckHours, l.StuckTolerance, l.Silence = 0, 50, 0, 0, 0, 0
	case hourly.SoilWater, hourly.SoilTension:
		// Soil-moisture probes: the physical range (volumetric content 0-100 %,
		// tension 0-2000 kPa, the ingest bounds); irrigation wets a probe within
		// minutes, so no spike limit; a probe that does not move is the zone's
		// probe-stuck check, which knows when water was applied. Probes
		// commonly report every 15-60 min: silent after 3 h (common practice,
		// no source).
		l.Min, l.Max, l.SpikePerMinute, l.StuckHours, l.StuckTolerance, l.Silence = 0, 100, 0, 0, 0, 3*time.Hour
		if q == hourly.SoilTension {
			l.Max = 2000
		}
	}
	return l
}

// Limits returns the resolved limits of q.
func (a *Alerts) Limits(q hourly.Quantity) Limits {
	l := DefaultLimits(q)
	c, ok := a.Quantities[q]
	if !ok {
		return l
	}
	if c.Min != nil {
		l.Min = *c.Min
	}
	if c.Max != nil {
		l.Max = *c.Max
	}
	if c.SpikePerMinute != nil {
		l.SpikePerMinute = *c.SpikePerMinute
	}
	if c.StuckHours != nil {
		l.StuckHours = *c.StuckHours
	}
	if c.StuckTolerance != nil {
		l.StuckTolerance = *c.StuckTolerance
	}
	if c.Silence != nil {
		l.Silence = c.Silence.D()
	}
	if c.Response != "" {
		l.Response = c.Response
	}
	return l
}

// StationChoices returns the choices for one station (the zero value when the
// station has none).
func (a *Alerts) StationChoices(site, station string) StationAlerts {
	for _, s := range a.Stations {
		if s.Station == station && (s.Site == "" || s.Site == site) {
			return s
		}
	}
	return StationAlerts{Site: site, Station: station}
}

// ResponseFor returns the response of station to an alert on quantity q.
func (a *Alerts) ResponseFor(site, station string, q hourly.Quantity) Response {
	if r, ok := a.StationChoices(site, station).Respond[q]; ok {
		return r
	}
	return a.Limits(q).Response
}

func setFloat(p **float64, v float64) {
	if *p == nil {
		*p = &v
	}
}

func setInt(p *int, v int) {
	if *p == 0 {
		*p = v
	}
}

// ApplyDefaults fills every unset alert setting with its default, as
// loading a configuration does (for settings built in code).
func (a *Alerts) ApplyDefaults() { a.setDefaults() }

func (a *Alerts) setDefaults() {
	if a.TopicPrefix == "" {
		a.TopicPrefix = DefaultAlertTopicPrefix
	}
	if a.UpdateEvery == 0 {
		a.UpdateEvery = Duration(DefaultAlertUpdateEvery)
	}
	if a.ClearAfter == 0 {
		a.ClearAfter = Duration(DefaultAlertClearAfter)
	}
	setFloat(&a.RHTolerance, DefaultRHTolerance)
	setFloat(&a.DewTolerance, DefaultDewTolerance)
	setFloat(&a.NightSolar.LimitWm2, DefaultNightSolarLimit)
	setInt(&a.NightSolar.Hours, DefaultNightSolarHours)
	setFloat(&a.NightSolar.DarkBelowRad, DefaultDarkBelowRad)
	e := &a.SolarEnvelope
	setInt(&e.Days, DefaultEnvelopeDays)
	setFloat(&e.LowRatio, DefaultEnvelopeLow)
	setFloat(&e.HighRatio, DefaultEnvelopeHigh)
	setFloat(&e.Margin, DefaultEnvelopeMargin)
	setInt(&e.MinClearDays, DefaultMinClearDays)
	setFloat(&e.ClearSpread, DefaultClearSpread)
	setInt(&a.HumidityDrift.Nights, DefaultDriftNights)
	setFloat(&a.HumidityDrift.RHBelow, DefaultDriftRHBelow)
	setFloat(&a.HumidityDrift.DewGap, 0)
	setFloat(&a.Calm.Speed, DefaultCalmSpeed)
	setInt(&a.Calm.DaytimeHours, DefaultCalmDaytimeHours)
	setInt(&a.Neighbours.Days, DefaultNeighbourDays)
	setInt(&a.Neighbours.MinStations, DefaultNeighbourStations)
	tol := DefaultNeighbourTolerance()
	for q, v := range a.Neighbours.Tolerance {
		tol[q] = v
	}
	a.Neighbours.Tolerance = tol
}

func validResponse(r Response) bool {
	return r == RespondKeep || r == RespondExclude || r == RespondStop
}

func validQuantity(q hourly.Quantity) bool { return slices.Contains(hourly.Quantities, q) }

// checkResponse validates a response for quantity q. Only solar has a
// documented fallback, so only solar may be excluded.
func checkResponse(path string, p *Problems, q hourly.Quantity, r Response) {
	switch {
	case !validResponse(r):
		p.Addf(path, "must be keep, exclude or stop, got %q", r)
	case r == RespondExclude && q != hourly.Solar:
		p.Addf(path, "exclude needs a fallback and only solar has one (Hargreaves-Samani); use keep or stop for %s", q)
	}
}

func (a *Alerts) validate(path string, p *Problems, c *Config) {
	if !validTopicLevel(a.TopicPrefix) {
		p.Addf(path+".topic_prefix", "must be one MQTT topic level without '+', '#' or '/', got %q", a.TopicPrefix)
	}
	if a.UpdateEvery < 0 {
		p.Addf(path+".update_every", "must be >= 0, got %s", a.UpdateEvery)
	}
	if a.ClearAfter < 0 {
		p.Addf(path+".clear_after", "must be >= 0, got %s", a.ClearAfter)
	}
	for q, qc := range a.Quantities {
		qp := fmt.Sprintf("%s.quantities.%s", path, q)
		if !validQuantity(q) {
			p.Addf(qp, "unknown quantity %q", q)
			continue
		}
		l := a.Limits(q)
		if l.Min >= l.Max {
			p.Addf(qp, "min must be below max, got min %s max %s", fmtF(l.Min), fmtF(l.Max))
		}
		if l.SpikePerMinute < 0 {
			p.Addf(qp+".spike_per_minute", "must be >= 0, got %s", fmtF(l.SpikePerMinute))
		}
		if l.StuckHours < 0 || l.StuckHours > 24*14 {
			p.Addf(qp+".stuck_hours", "must be 0-336, got %d", l.StuckHours)
		}
		if l.StuckTolerance < 0 {
			p.Addf(qp+".stuck_tolerance", "must be >= 0, got %s", fmtF(l.StuckTolerance))
		}
		if l.Silence < 0 {
			p.Addf(qp+".silence", "must be >= 0, got %s", l.Silence)
		}
		if qc.Response != "" {
			checkResponse(qp+".response", p, q, qc.Response)
		}
	}
	if *a.RHTolerance < 0 || *a.RHTolerance > 20 {
		p.Addf(path+".rh_tolerance_pct", "must be 0-20, got %s", fmtF(*a.RHTolerance))
	}
	if *a.DewTolerance < 0 || *a.DewTolerance > 10 {
		p.Addf(path+".dew_tolerance_c", "must be 0-10, got %s", fmtF(*a.DewTolerance))
	}
	if v := *a.NightSolar.LimitWm2; v <= 0 {
		p.Addf(path+".night_solar.limit_w_m2", "must be > 0, got %s", fmtF(v))
	}
	if a.NightSolar.Hours < 1 {
		p.Addf(path+".night_solar.hours", "must be >= 1, got %d", a.NightSolar.Hours)
	}
	if v := *a.NightSolar.DarkBelowRad; v > 0 || v < -1.5 {
		p.Addf(path+".night_solar.dark_below_rad", "must be between -1.5 and 0, got %s", fmtF(v))
	}
	e := a.SolarEnvelope
	if e.Days < 1 || e.Days > MaxAlertWindowDays {
		p.Addf(path+".solar_envelope.days", "must be 1-%d, got %d", MaxAlertWindowDays, e.Days)
	}
	if *e.LowRatio <= 0 || *e.LowRatio >= 1 {
		p.Addf(path+".solar_envelope.low_ratio", "must be between 0 and 1, got %s", fmtF(*e.LowRatio))
	}
	if *e.HighRatio <= 1 {
		p.Addf(path+".solar_envelope.high_ratio", "must be > 1, got %s", fmtF(*e.HighRatio))
	}
	if *e.Margin < 0 || *e.Margin > 0.5 {
		p.Addf(path+".solar_envelope.margin", "must be 0-0.5, got %s", fmtF(*e.Margin))
	}
	if e.MinClearDays < 1 || e.MinClearDays > e.Days {
		p.Addf(path+".solar_envelope.min_clear_days", "must be 1-%d (days), got %d", e.Days, e.MinClearDays)
	}
	if *e.ClearSpread <= 0 || *e.ClearSpread > 1 {
		p.Addf(path+".solar_envelope.clear_spread", "must be in (0, 1], got %s", fmtF(*e.ClearSpread))
	}
	h := a.HumidityDrift
	if h.Nights < 1 || h.Nights > MaxAlertWindowDays {
		p.Addf(path+".humidity_drift.nights", "must be 1-%d, got %d", MaxAlertWindowDays, h.Nights)
	}
	if *h.RHBelow <= 0 || *h.RHBelow > 100 {
		p.Addf(path+".humidity_drift.rh_below_pct", "must be in (0, 100], got %s", fmtF(*h.RHBelow))
	}
	if *h.DewGap < 0 {
		p.Addf(path+".humidity_drift.dew_gap_c", "must be >= 0, got %s", fmtF(*h.DewGap))
	}
	if *a.Calm.Speed <= 0 {
		p.Addf(path+".calm_wind.speed_m_s", "must be > 0, got %s", fmtF(*a.Calm.Speed))
	}
	if a.Calm.DaytimeHours < 1 || a.Calm.DaytimeHours > 24*MaxAlertWindowDays {
		p.Addf(path+".calm_wind.daytime_hours", "must be 1-%d, got %d", 24*MaxAlertWindowDays, a.Calm.DaytimeHours)
	}
	n := a.Neighbours
	if n.Days < 1 || n.Days > MaxAlertWindowDays {
		p.Addf(path+".neighbours.days", "must be 1-%d, got %d", MaxAlertWindowDays, n.Days)
	}
	if n.MinStations < 3 {
		p.Addf(path+".neighbours.min_stations", "must be >= 3 (with two stations neither can be blamed), got %d", n.MinStations)
	}
	for q, v := range n.Tolerance {
		if _, ok := DefaultNeighbourTolerance()[q]; !ok {
			p.Addf(path+".neighbours.tolerance."+string(q), "not compared between stations (air_temp, rel_humidity, wind, solar are), got %q", q)
		} else if v <= 0 {
			p.Addf(path+".neighbours.tolerance."+string(q), "must be > 0, got %s", fmtF(v))
		}
	}
	for i, s := range a.Stations {
		sp := fmt.Sprintf("%s.stations[%d]", path, i)
		found := 0
		for _, site := range c.Sites {
			if s.Site != "" && site.ID != s.Site {
				continue
			}
			if site.StationByID(s.Station) != nil {
				found++
			}
		}
		switch {
		case found == 0 && s.Site != "":
			p.Addf(sp+".station", "no station %q in site %q", s.Station, s.Site)
		case found == 0:
			p.Addf(sp+".station", "no station %q in any site", s.Station)
		case found > 1:
			p.Addf(sp+".site", "station %q exists in several sites; name the site", s.Station)
		}
		for q, r := range s.Respond {
			rp := fmt.Sprintf("%s.respond.%s", sp, q)
			if !validQuantity(q) {
				p.Addf(rp, "unknown quantity %q", q)
				continue
			}
			checkResponse(rp, p, q, r)
		}
	}
}

// MaxAlertWindowDays bounds every window of days the checks keep.
const MaxAlertWindowDays = 14

func validTopicLevel(s string) bool {
	if s == "" {
		return false
	}
	for _, r := range s {
		if r == '+' || r == '#' || r == '/' || r == 0 {
			return false
		}
	}
	return true
}

func fmtF(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// HTTP configures the listener of the metrics and health endpoints.
type HTTP struct {
	// Listen is the host:port of /metrics, /healthz and /readyz. Default
	// 127.0.0.1:9470 (loopback: put a reverse proxy in front to expose it).
	Listen string `yaml:"listen"`
	// Disabled turns the listener off.
	Disabled bool `yaml:"disabled"`
	// TokenFile, when set, names a file holding the access token the status
	// pages and their JSON API require (/metrics, /healthz and /readyz stay
	// open). Empty: no token (keep the listener on loopback then).
	TokenFile string `yaml:"token_file"`
}

// DefaultHTTPListen is the default metrics and health address.
const DefaultHTTPListen = "127.0.0.1:9470"

func (h *HTTP) setDefaults() {
	if h.Listen == "" {
		h.Listen = DefaultHTTPListen
	}
}

func (h *HTTP) validate(path string, p *Problems) {
	if h.Disabled {
		return
	}
	_, port, err := net.SplitHostPort(h.Listen)
	if err != nil {
		p.Addf(path+".listen", "must be host:port, got %q", h.Listen)
		return
	}
	if n, err := strconv.Atoi(port); err != nil || n < 0 || n > 65535 {
		p.Addf(path+".listen", "port must be 0-65535, got %q", port)
	}
}
