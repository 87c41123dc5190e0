package config

import (
	"fmt"
	"slices"
	"sort"
	"strings"
	"time"

	"etpulse/hourly"
)

// Station is one weather station and its sensors.
type Station struct {
	ID           string           `yaml:"id"`
	Latitude     float64          `yaml:"latitude"`         // degrees, north positive
	Longitude    float64          `yaml:"longitude"`        // degrees, east positive
	Elevation    float64          `yaml:"elevation_m"`      // m above sea level
	UTCOffset    float64          `yaml:"utc_offset_hours"` // standard time, e.g. -8
	Reference    hourly.Reference `yaml:"reference"`        // short|tall|fao56, default short
	ClearSky     hourly.ClearSky  `yaml:"clear_sky"`        // simple|full, default simple
	WindHeight   float64          `yaml:"wind_height_m"`    // m above ground; 0 or unset means 2
	MinCoverage  float64          `yaml:"min_coverage"`     // 0-1; 0 or unset means 0.75
	CloseGrace   Duration         `yaml:"close_grace"`      // default 2m
	LateWindow   Duration         `yaml:"late_window"`      // default 6h
	SilenceClose Duration         `yaml:"silence_close"`    // wall-clock fallback, default 15m
	MaxFuture    Duration         `yaml:"max_future"`       // readings further ahead are rejected, default 5m
	// MinWind is the lower limit of u2 in the equation, m/s; unset means
	// hourly.DefaultMinWind2 (0.5, as FAO-56 advises), 0 turns it off.
	MinWind *float64 `yaml:"min_wind_m_s"`
	// InsideGreenhouse: the station stands inside a greenhouse; the reference
	// is computed with the fixed aerodynamic resistance
	// hourly.GreenhouseResistance instead of the (near-zero) measured wind.
	// Short and fao56 references only.
	InsideGreenhouse bool     `yaml:"inside_greenhouse"`
	Sensors          []Sensor `yaml:"sensors"`
}

// Station defaults.
const (
	DefaultWindHeight   = 2.0
	DefaultMinCoverage  = 0.75
	DefaultCloseGrace   = 2 * time.Minute
	DefaultLateWindow   = 6 * time.Hour
	DefaultSilenceClose = 15 * time.Minute
	DefaultMaxFuture    = 5 * time.Minute
)

// HourlyStation returns the station's fixed description for hourly.Compute,
// with its per-station constants prepared.
func (s *Station) HourlyStation() hourly.Station {
	return hourly.Station{
		Latitude:  s.Latitude,
		Longitude: s.Longitude,
		Elevation: s.Elevation,
		UTCOffset: s.UTCOffset,
		ClearSky:  s.ClearSky,
		MinWind2:  s.minWind(),
		AeroResistance: func() float64 {
			if s.InsideGreenhouse {
				return hourly.GreenhouseResistance
			}
			return 0
		}(),
	}.Prepared()
}

// minWind is the configured minimum wind, or the default when unset.
func (s *Station) minWind() float64 {
	if s.MinWind == nil {
		return hourly.DefaultMinWind2
	}
	return *s.MinWind
}

// Format is the payload format of a sensor topic.
type Format string

// The payload formats.
const (
	// FormatNumber is a bare decimal number, e.g. "21.4".
	FormatNumber Format = "number"
	// FormatJSON is a JSON object with one value and an optional timestamp,
	// e.g. {"value": 21.4, "time": "2026-06-01T10:00:00Z"}.
	FormatJSON Format = "json"
	// FormatFields is one JSON object carrying several quantities, each under
	// its own key, with an optional shared timestamp.
	FormatFields Format = "fields"
	// FormatSenML is a SenML pack (RFC 8428, JSON representation).
	FormatSenML Format = "senml"
)

// RainMode tells what a rain sensor's value means.
type RainMode string

// The rain modes.
const (
	// RainIncrement: the value is the rain fallen since the previous message.
	RainIncrement RainMode = "increment"
	// RainTips: the value is a number of bucket tips since the previous
	// message; mm_per_tip converts it.
	RainTips RainMode = "tips"
	// RainCounter: the value is a cumulative counter (in the unit, or in tips
	// when mm_per_tip is set) that may wrap at rollover_at.
	RainCounter RainMode = "counter"
)

// Channel is one quantity carried by a sensor's payload, with its unit and,
// for rain, how the value counts.
type Channel struct {
	// Quantity is one of the hourly quantity names (air_temp, rel_humidity,
	// dew_point, vapour_pressure, wind, solar, rain, net_rad, soil_heat).
	Quantity hourly.Quantity `yaml:"quantity"`
	// Unit is the unit the payload uses, one of hourly.UnitsFor(Quantity).
	// Omitted for rain counted in tips.
	Unit string `yaml:"unit"`
	// RainMode is increment (default), tips or counter; rain only.
	RainMode RainMode `yaml:"rain_mode"`
	// MMPerTip is the depth of one bucket tip in mm; required for tips,
	// optional for counter (the counter then counts tips).
	MMPerTip float64 `yaml:"mm_per_tip"`
	// RolloverAt is the counter value at which a rain counter wraps to zero
	// (e.g. 65536); 0 means it never wraps. Counter only.
	RolloverAt float64 `yaml:"rollover_at"`
}

// Sensor is one MQTT topic of a station and how to read its payload.
type Sensor struct {
	ID     string `yaml:"id"`     // unique within the station
	Topic  string `yaml:"topic"`  // exact MQTT topic, no wildcards; unique in the whole config
	Format Format `yaml:"format"` // number, json, fields or senml

	// Channel gives quantity and unit for the number and json formats.
	Channel `yaml:",inline"`

	// ValueKey is the JSON key of the value (json format). Default "value".
	ValueKey string `yaml:"value_key"`
	// TimeKey is the JSON key of the optional timestamp (json and fields
	// formats): an RFC 3339 string or a number of unix seconds (or unix
	// milliseconds when its magnitude is 1e11 or more). Default "time".
	TimeKey string `yaml:"time_key"`
	// Fields maps the JSON keys of a fields payload to their quantities.
	Fields map[string]Channel `yaml:"fields"`
	// Records maps SenML record names (base name + name) to their quantities.
	Records map[string]Channel `yaml:"records"`
	// Ignore lists field keys or SenML record names that are expected in the
	// payload but carry nothing the gateway uses (e.g. battery). Other
	// unmapped keys are rejected as unknown fields.
	Ignore []string `yaml:"ignore"`
}

// ChannelName is the name of the sensor's channel key in readings and
// alerts: the sensor id for the single-value formats (key ""),
// "<sensor>.<key>" for a field or SenML record, so every quantity of a
// multi-quantity payload is told apart.
func (s *Sensor) ChannelName(key string) string {
	if key == "" {
		return s.ID
	}
	return s.ID + "." + key
}

// Channels returns the sensor's channels keyed by payload field or record
// name; for the number and json formats the single key is "".
func (s *Sensor) Channels() map[string]Channel {
	switch s.Format {
	case FormatFields:
		return s.Fields
	case FormatSenML:
		return s.Records
	}
	return map[string]Channel{"": s.Channel}
}

// SortedKeys returns the keys of a channel map in sorted order.
func SortedKeys(m map[string]Channel) []string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	return keys
}

func (s *Station) setDefaults() {
	if s.Reference == "" {
		s.Reference = hourly.Short
	}
	if s.ClearSky == "" {
		s.ClearSky = hourly.ClearSkySimple
	}
	if s.WindHeight == 0 {
		s.WindHeight = DefaultWindHeight
	}
	if s.MinCoverage == 0 {
		s.MinCoverage = DefaultMinCoverage
	}
	if s.CloseGrace == 0 {
		s.CloseGrace = Duration(DefaultCloseGrace)
	}
	if s.LateWindow == 0 {
		s.LateWindow = Duration(DefaultLateWindow)
	}
	if s.SilenceClose == 0 {
		s.SilenceClose = Duration(DefaultSilenceClose)
	}
	if s.MaxFuture == 0 {
		s.MaxFuture = Duration(DefaultMaxFuture)
	}
	for i := range s.Sensors {
		s.Sensors[i].setDefaults()
	}
}

func (s *Sensor) setDefaults() {
	if s.Format == FormatJSON && s.ValueKey == "" {
		s.ValueKey = "value"
	}
	if (s.Format == FormatJSON || s.Format == FormatFields) && s.TimeKey == "" {
		s.TimeKey = "time"
	}
	switch s.Format {
	case FormatNumber, FormatJSON:
		s.Channel.setDefaults()
	case FormatFields:
		for k, c := range s.Fields {
			c.setDefaults()
			s.Fields[k] = c
		}
	case FormatSenML:
		for k, c := range s.Records {
			c.setDefaults()
			s.Records[k] = c
		}
	}
}

func (c *Channel) setDefaults() {
	if c.Quantity == hourly.Rain && c.RainMode == "" {
		c.RainMode = RainIncrement
	}
}

func (s *Station) validate(path string, p *Problems) {
	if !validID(s.ID) {
		p.Addf(path+".id", "must be 1-64 characters of a-z, 0-9, '-' or '_', got %q", s.ID)
	}
	// The bounds are hourly's (hourly/limits.go); here they only get field paths.
	if !(s.Latitude >= hourly.MinLatitude && s.Latitude <= hourly.MaxLatitude) {
		p.Addf(path+".latitude", "must be between %g and %g degrees, got %g", hourly.MinLatitude, hourly.MaxLatitude, s.Latitude)
	}
	if !(s.Longitude >= hourly.MinLongitude && s.Longitude <= hourly.MaxLongitude) {
		p.Addf(path+".longitude", "must be between %g and %g degrees (east positive), got %g", hourly.MinLongitude, hourly.MaxLongitude, s.Longitude)
	}
	if !(s.Elevation >= hourly.MinElevation && s.Elevation <= hourly.MaxElevation) {
		p.Addf(path+".elevation_m", "must be between %g and %g m, got %g", hourly.MinElevation, hourly.MaxElevation, s.Elevation)
	}
	if !(s.UTCOffset >= hourly.MinUTCOffset && s.UTCOffset <= hourly.MaxUTCOffset) {
		p.Addf(path+".utc_offset_hours", "must be between %g and %g hours, got %g", hourly.MinUTCOffset, hourly.MaxUTCOffset, s.UTCOffset)
	} else if q := s.UTCOffset * 4; q != float64(int(q)) {
		p.Addf(path+".utc_offset_hours", "must be a whole number of quarter hours, got %g", s.UTCOffset)
	}
	switch s.Reference {
	case hourly.Short, hourly.Tall, hourly.FAO56:
	default:
		p.Addf(path+".reference", "must be short, tall or fao56, got %q", s.Reference)
	}
	switch s.ClearSky {
	case hourly.ClearSkySimple, hourly.ClearSkyFull:
	default:
		p.Addf(path+".clear_sky", "must be simple or full, got %q", s.ClearSky)
	}
	if !(s.WindHeight >= hourly.MinWindHeight && s.WindHeight <= hourly.MaxWindHeight) {
		p.Addf(path+".wind_height_m", "must be between %g and %g m, got %g", hourly.MinWindHeight, hourly.MaxWindHeight, s.WindHeight)
	}
	if !(s.MinCoverage > 0 && s.MinCoverage <= 1) {
		p.Addf(path+".min_coverage", "must be a fraction above 0 and at most 1, got %g", s.MinCoverage)
	}
	if w := s.minWind(); !(w >= 0 && w <= hourly.MaxMinWind2) {
		p.Addf(path+".min_wind_m_s", "must be between 0 (off) and %g m/s (FAO-56 advises 0.5), got %g", hourly.MaxMinWind2, w)
	}
	if s.InsideGreenhouse && s.Reference == hourly.Tall {
		p.Addf(path+".inside_greenhouse", "the greenhouse form (fixed aerodynamic resistance) is for the grass references; set reference to short or fao56, or remove inside_greenhouse")
	}
	checkDur := func(key string, d Duration, lo, hi time.Duration) bool {
		if d.D() < lo || d.D() > hi {
			p.Addf(path+"."+key, "must be between %s and %s, got %s", fmtDur(lo), fmtDur(hi), fmtDur(d.D()))
			return false
		}
		return true
	}
	graceOK := checkDur("close_grace", s.CloseGrace, time.Second, time.Hour)
	checkDur("late_window", s.LateWindow, 0, 7*24*time.Hour)
	silenceOK := checkDur("silence_close", s.SilenceClose, time.Minute, 24*time.Hour)
	checkDur("max_future", s.MaxFuture, time.Second, 24*time.Hour)
	if graceOK && silenceOK && s.SilenceClose.D() < s.CloseGrace.D() {
		p.Addf(path+".silence_close", "must not be shorter than close_grace (%s), got %s", fmtDur(s.CloseGrace.D()), fmtDur(s.SilenceClose.D()))
	}

	if len(s.Sensors) == 0 {
		p.Add(path+".sensors", "at least one sensor is required")
	}
	ids := map[string]bool{}
	have := map[hourly.Quantity]bool{}
	for i := range s.Sensors {
		sn := &s.Sensors[i]
		sp := fmt.Sprintf("%s.sensors[%d]", path, i)
		if !validID(sn.ID) {
			p.Addf(sp+".id", "must be 1-64 characters of a-z, 0-9, '-' or '_', got %q", sn.ID)
		} else if ids[sn.ID] {
			p.Addf(sp+".id", "duplicate sensor id %q", sn.ID)
		}
		ids[sn.ID] = true
		sn.validate(sp, p)
		for _, c := range sn.Channels() {
			have[c.Quantity] = true
		}
	}
	if len(s.Sensors) > 0 {
		for _, q := range []hourly.Quantity{hourly.AirTemp, hourly.Wind, hourly.Solar} {
			if !have[q] {
				p.Addf(path+".sensors", "no sensor measures %s, which the hourly ET needs", q)
			}
		}
		if !have[hourly.RelHumidity] && !have[hourly.DewPoint] && !have[hourly.VapourPressure] {
			p.Add(path+".sensors", "no sensor measures humidity (rel_humidity, dew_point or vapour_pressure), which the hourly ET needs")
		}
	}
}

func (s *Sensor) validate(path string, p *Problems) {
	if s.Topic == "" {
		p.Add(path+".topic", "required (the exact MQTT topic the sensor publishes on)")
	} else if msg := topicProblem(s.Topic); msg != "" {
		p.Addf(path+".topic", "%s, got %q", msg, s.Topic)
	}
	single := s.Format == FormatNumber || s.Format == FormatJSON
	switch s.Format {
	case FormatNumber, FormatJSON, FormatFields, FormatSenML:
	default:
		p.Addf(path+".format", "must be number, json, fields or senml, got %q", s.Format)
		return
	}
	if single {
		s.Channel.validate(path, p)
		if len(s.Fields) > 0 {
			p.Addf(path+".fields", "only for format fields, got format %q", s.Format)
		}
		if len(s.Records) > 0 {
			p.Addf(path+".records", "only for format senml, got format %q", s.Format)
		}
		if len(s.Ignore) > 0 {
			p.Addf(path+".ignore", "only for formats fields and senml, got format %q", s.Format)
		}
	} else if s.Channel != (Channel{}) {
		p.Addf(path+".quantity", "for format %s give quantity and unit per entry of %s, not on the sensor", s.Format, map[Format]string{FormatFields: "fields", FormatSenML: "records"}[s.Format])
	}
	if s.Format != FormatJSON && s.ValueKey != "" {
		p.Addf(path+".value_key", "only for format json, got format %q", s.Format)
	}
	if s.Format != FormatJSON && s.Format != FormatFields && s.TimeKey != "" {
		p.Addf(path+".time_key", "only for formats json and fields, got format %q", s.Format)
	}
	if s.Format == FormatJSON && s.ValueKey == s.TimeKey {
		p.Addf(path+".time_key", "must differ from value_key, both are %q", s.ValueKey)
	}
	validateMap := func(key string, m map[string]Channel) {
		if len(m) == 0 {
			p.Addf(path+"."+key, "at least one entry is required for format %s", s.Format)
		}
		for _, k := range SortedKeys(m) {
			if k == "" {
				p.Addf(path+"."+key, "empty key")
				continue
			}
			if s.Format == FormatFields && k == s.TimeKey {
				p.Addf(fmt.Sprintf("%s.%s.%s", path, key, k), "is the time_key; choose another time_key or field")
				continue
			}
			c := m[k]
			c.validate(fmt.Sprintf("%s.%s.%s", path, key, k), p)
		}
		for _, ig := range s.Ignore {
			if _, ok := m[ig]; ok {
				p.Addf(path+".ignore", "%q is also mapped in %s", ig, key)
			}
		}
	}
	switch s.Format {
	case FormatFields:
		validateMap("fields", s.Fields)
		if len(s.Records) > 0 {
			p.Addf(path+".records", "only for format senml, got format %q", s.Format)
		}
	case FormatSenML:
		validateMap("records", s.Records)
		if len(s.Fields) > 0 {
			p.Addf(path+".fields", "only for format fields, got format %q", s.Format)
		}
	}
}

func (c *Channel) validate(path string, p *Problems) {
	if !slices.Contains(hourly.Quantities, c.Quantity) {
		names := make([]string, len(hourly.Quantities))
		for i, q := range hourly.Quantities {
			names[i] = string(q)
		}
		p.Addf(path+".quantity", "must be one of %s, got %q", strings.Join(names, ", "), c.Quantity)
		return
	}
	if c.Quantity != hourly.Rain {
		if c.RainMode != "" {
			p.Addf(path+".rain_mode", "only for quantity rain, got quantity %s", c.Quantity)
		}
		if c.MMPerTip != 0 {
			p.Addf(path+".mm_per_tip", "only for quantity rain, got quantity %s", c.Quantity)
		}
		if c.RolloverAt != 0 {
			p.Addf(path+".rollover_at", "only for quantity rain, got quantity %s", c.Quantity)
		}
		c.validateUnit(path, p)
		return
	}
	tipCount := false
	switch c.RainMode {
	case RainIncrement:
		if c.MMPerTip != 0 {
			p.Addf(path+".mm_per_tip", "only for rain_mode tips or counter, got rain_mode %s", c.RainMode)
		}
	case RainTips:
		tipCount = true
		if !(c.MMPerTip > 0 && c.MMPerTip <= 10) {
			p.Addf(path+".mm_per_tip", "rain_mode tips needs a tip depth above 0 and at most 10 mm, got %g", c.MMPerTip)
		}
	case RainCounter:
		tipCount = c.MMPerTip != 0
		if !(c.MMPerTip >= 0 && c.MMPerTip <= 10) {
			p.Addf(path+".mm_per_tip", "must be above 0 and at most 10 mm, got %g", c.MMPerTip)
		}
		if !(c.RolloverAt >= 0 && c.RolloverAt <= 1e15) {
			p.Addf(path+".rollover_at", "must be 0 (never wraps) or a positive counter value, got %g", c.RolloverAt)
		}
	default:
		p.Addf(path+".rain_mode", "must be increment, tips or counter, got %q", c.RainMode)
		return
	}
	if c.RainMode != RainCounter && c.RolloverAt != 0 {
		p.Addf(path+".rollover_at", "only for rain_mode counter, got rain_mode %s", c.RainMode)
	}
	if tipCount {
		if c.Unit != "" {
			p.Addf(path+".unit", "must be omitted when the value counts tips (mm_per_tip is set), got %q", c.Unit)
		}
		return
	}
	c.validateUnit(path, p)
}

func (c *Channel) validateUnit(path string, p *Problems) {
	units := hourly.UnitsFor(c.Quantity)
	if c.Unit == "" {
		p.Addf(path+".unit", "required for quantity %s; one of %s", c.Quantity, strings.Join(units, ", "))
		return
	}
	if !slices.Contains(units, c.Unit) {
		p.Addf(path+".unit", "must be one of %s for quantity %s, got %q", strings.Join(units, ", "), c.Quantity, c.Unit)
	}
}

// topicProblem describes what is wrong with a subscription topic, or "".
func topicProblem(t string) string {
	switch {
	case t == "":
		return "required"
	case len(t) > 65535:
		return "longer than 65535 bytes"
	case strings.ContainsAny(t, "+#"):
		return "must be an exact topic without the wildcards '+' or '#'"
	case strings.ContainsRune(t, 0):
		return "must not contain a NUL character"
	case strings.HasPrefix(t, "$"):
		return "must not start with '$' (reserved for the broker)"
	}
	return ""
}

// validateTopics checks that no MQTT topic is used twice in the whole
// configuration (a topic belongs to exactly one sensor).
func validateTopics(c *Config, p *Problems) {
	seen := map[string]string{}
	for i := range c.Sites {
		for j := range c.Sites[i].Stations {
			for k := range c.Sites[i].Stations[j].Sensors {
				t := c.Sites[i].Stations[j].Sensors[k].Topic
				if t == "" {
					continue
				}
				path := fmt.Sprintf("sites[%d].stations[%d].sensors[%d].topic", i, j, k)
				if first, ok := seen[t]; ok {
					p.Addf(path, "topic %q is already used by %s", t, strings.TrimSuffix(first, ".topic"))
					continue
				}
				seen[t] = path
			}
		}
	}
}

// fmtDur prints a duration without trailing zero units ("1h", "90s", "2h30m").
func fmtDur(d time.Duration) string {
	s := d.String()
	if strings.HasSuffix(s, "m0s") {
		s = strings.TrimSuffix(s, "0s")
	}
	if strings.HasSuffix(s, "h0m") {
		s = strings.TrimSuffix(s, "0m")
	}
	return s
}
