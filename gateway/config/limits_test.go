package config

import (
	"errors"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
	"etpulse/hourly"
)

// limitCase sets one field of a loaded configuration to v; path is the
// field path its problem names.
type limitCase struct {
	path   string
	set    func(c *Config, v float64)
	lo, hi float64
	loOpen bool // lo itself is refused (the range is (lo, hi])
	noLow  bool // the lower bound cannot be crossed (0 means unset)
	whole  bool // an integer field: the next value outside is one away
}

// TestConfigLimitsFollowDomain: for every limit hourly or controllers
// declare, the configuration accepts exactly the domain's bounds (and the
// domain accepts what it built from them) and refuses the next value
// outside with a problem at the field's path, so config and domain cannot
// drift apart.
func TestConfigLimitsFollowDomain(t *testing.T) {
	st := func(c *Config) *Station { return &c.Sites[0].Stations[0] }
	z := func(c *Config) *Zone { return &c.Sites[0].Zones[0] }
	const sp, zp = "sites[0].stations[0].", "sites[0].zones[0]."
	ptr := func(v float64) *float64 { return &v }
	cases := []limitCase{
		{path: sp + "latitude", set: func(c *Config, v float64) { st(c).Latitude = v }, lo: hourly.MinLatitude, hi: hourly.MaxLatitude},
		{path: sp + "longitude", set: func(c *Config, v float64) { st(c).Longitude = v }, lo: hourly.MinLongitude, hi: hourly.MaxLongitude},
		{path: sp + "elevation_m", set: func(c *Config, v float64) { st(c).Elevation = v }, lo: hourly.MinElevation, hi: hourly.MaxElevation},
		{path: sp + "utc_offset_hours", set: func(c *Config, v float64) { st(c).UTCOffset = v }, lo: hourly.MinUTCOffset, hi: hourly.MaxUTCOffset},
		{path: sp + "wind_height_m", set: func(c *Config, v float64) { st(c).WindHeight = v }, lo: hourly.MinWindHeight, hi: hourly.MaxWindHeight},
		{path: sp + "min_wind_m_s", set: func(c *Config, v float64) { st(c).MinWind = ptr(v) }, lo: 0, hi: hourly.MaxMinWind2},

		{path: zp + "crop.kc", set: func(c *Config, v float64) {
			z(c).Crop.Kc, z(c).Crop.Season = ptr(v), nil
		}, lo: controllers.MinKc, hi: controllers.MaxKc},
		{path: zp + "crop.season.kc_mid", set: func(c *Config, v float64) { z(c).Crop.Season.KcMid = v }, lo: controllers.MinKc, hi: controllers.MaxKc},
		{path: zp + "crop.season.off_season_kc", set: func(c *Config, v float64) { z(c).Crop.Season.OffSeasonKc = ptr(v) }, lo: controllers.MinKc, hi: controllers.MaxKc},
		{path: zp + "crop.season", set: func(c *Config, v float64) {
			s := z(c).Crop.Season
			s.InitialDays, s.DevelopmentDays, s.MidDays, s.LateDays = int(v)-3, 1, 1, 1
		}, lo: 4, hi: controllers.MaxSeasonDays, noLow: true, whole: true},
		{path: zp + "system.rate_mm_h", set: func(c *Config, v float64) {
			z(c).System.Drip, z(c).System.RateMMH, z(c).Source = nil, v, ""
		}, lo: 0, hi: controllers.MaxRate, loOpen: true, noLow: true},
		{path: zp + "system.efficiency", set: func(c *Config, v float64) { z(c).System.Efficiency = ptr(v) }, lo: 0, hi: controllers.MaxEfficiency, loOpen: true},
		{path: zp + "system.min_minutes", set: func(c *Config, v float64) {
			z(c).System.MinMinutes = int(v)
			z(c).System.MaxMinutes, z(c).System.MaxMinutesPerDay = controllers.MaxRunMinutes, controllers.MaxRunMinutes
		}, lo: controllers.MinRunMinutes, hi: controllers.MaxRunMinutes, whole: true},
		{path: zp + "system.max_minutes", set: func(c *Config, v float64) {
			z(c).System.MinMinutes, z(c).System.MaxMinutes = controllers.MinRunMinutes, int(v)
		}, lo: controllers.MinRunMinutes, hi: controllers.MaxRunMinutes, whole: true},
		{path: zp + "system.max_minutes_per_day", set: func(c *Config, v float64) {
			z(c).System.MinMinutes, z(c).System.MaxMinutes, z(c).System.MaxMinutesPerDay = controllers.MinRunMinutes, controllers.MinRunMinutes, int(v)
		}, lo: controllers.MinRunMinutes, hi: controllers.MaxRunMinutes, whole: true},
		{path: zp + "fail_safe.max_missing_hours", set: func(c *Config, v float64) { z(c).FailSafe.MaxMissingHours = int(v) },
			lo: controllers.MinMissingHours, hi: controllers.MaxMissingHoursCap, whole: true},
		{path: zp + "fail_safe.fallback_et_mm_day[6]", set: func(c *Config, v float64) { z(c).FailSafe.FallbackETMMDay[6] = v },
			lo: 0, hi: controllers.MaxFallbackET, loOpen: true},
		{path: zp + "soil.p", set: func(c *Config, v float64) { z(c).Soil.P = v }, lo: controllers.MinP, hi: controllers.MaxP},
		{path: zp + "soil.root_depth_m", set: func(c *Config, v float64) { z(c).Soil.RootDepthM, z(c).Soil.TriggerMM = v, 0 }, lo: 0, hi: controllers.MaxRootDepth, loOpen: true},
		{path: zp + "soil.field_capacity", set: func(c *Config, v float64) {
			z(c).Soil.FieldCapacity, z(c).Soil.WiltingPoint, z(c).Soil.TriggerMM = v, 0, 0
		}, lo: 0, hi: controllers.MaxFieldCapacity, loOpen: true},
		{path: zp + "soil.available_water_mm_per_m", set: func(c *Config, v float64) {
			z(c).Soil.AvailableWaterMMPerM, z(c).Soil.FieldCapacity, z(c).Soil.WiltingPoint, z(c).Soil.TriggerMM = v, 0, 0, 0
		}, lo: 0, hi: controllers.MaxAvailableWater, loOpen: true, noLow: true},
		{path: zp + "commands.max_attempts", set: func(c *Config, v float64) { z(c).Commands.MaxAttempts = int(v) }, lo: 1, hi: controllers.MaxCommandAttempts, whole: true},
		{path: zp + "commands.overrun_margin_pct", set: func(c *Config, v float64) { z(c).Commands.OverrunMarginPct = ptr(v) },
			lo: 0, hi: controllers.MaxOverrunMargin * 100},
	}
	for _, lc := range cases {
		t.Run(strings.TrimPrefix(lc.path, "sites[0]."), func(t *testing.T) {
			step := func(v, dir float64) float64 {
				if lc.whole {
					return v + dir
				}
				return math.Nextafter(v, math.Inf(int(dir)))
			}
			low, out := lc.lo, step(lc.lo, -1)
			if lc.loOpen {
				low, out = step(lc.lo, 1), lc.lo
			}
			for _, v := range []float64{low, lc.hi} {
				c := loadLimitsExample(t)
				lc.set(c, v)
				assert.Empty(t, problemsAt(c, lc.path), "%s = %v is a domain bound", lc.path, v)
				assertDomainAccepts(t, c, lc.path, v)
			}
			outs := []float64{step(lc.hi, 1)}
			if !lc.noLow {
				outs = append(outs, out)
			}
			for _, v := range outs {
				c := loadLimitsExample(t)
				lc.set(c, v)
				assert.NotEmpty(t, problemsAt(c, lc.path), "%s = %v is outside the domain bounds", lc.path, v)
			}
		})
	}
}

// loadLimitsExample loads the zones example, a valid configuration with a
// station and zones.
func loadLimitsExample(t *testing.T) *Config {
	t.Helper()
	c, err := Load(filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml"))
	require.NoError(t, err)
	return c
}

// problemsAt returns the problems Validate reports at path (or below it).
func problemsAt(c *Config, path string) []string {
	var ve *ValidationError
	if err := c.Validate(); !errors.As(err, &ve) {
		return nil
	}
	var out []string
	for _, p := range ve.Problems {
		if strings.HasPrefix(p, path+": ") || strings.HasPrefix(p, path+".") {
			out = append(out, p)
		}
	}
	return out
}

// assertDomainAccepts checks that the whole configuration is valid and that
// the domain accepts the station and zone it builds.
func assertDomainAccepts(t *testing.T, c *Config, path string, v float64) {
	t.Helper()
	if !assert.NoError(t, c.Validate(), "%s = %v", path, v) {
		return
	}
	site := &c.Sites[0]
	st := &site.Stations[0]
	assert.NoError(t, st.HourlyStation().Validate(), "%s = %v: hourly refuses the station", path, v)
	_, err := hourly.WindFactor(st.WindHeight)
	assert.NoError(t, err, "%s = %v: hourly refuses the wind height", path, v)
	zn := &site.Zones[0]
	_, err = zn.Controller(site.StationByID(zn.Station))
	assert.NoError(t, err, "%s = %v: controllers refuse the zone", path, v)
}
