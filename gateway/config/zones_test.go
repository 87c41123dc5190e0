package config

import (
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
)

func TestZonesExample(t *testing.T) {
	c, err := Load(filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml"))
	require.NoError(t, err)
	site := &c.Sites[0]
	require.Len(t, site.Zones, 2)

	pear := &site.Zones[0]
	rate, err := pear.RateMMH()
	require.NoError(t, err)
	assert.InDelta(t, 1.226667, rate, 1e-6) // 6 x 2.3 / 11.25
	assert.Equal(t, "etpulse/brackenby/zones/pear-block-2/command", pear.CommandTopicIn(c.Prefix(), site.ID))
	assert.Equal(t, "etpulse/brackenby/zones/pear-block-2/report", pear.ReportTopicIn(c.Prefix(), site.ID))
	cz, err := pear.Controller(site.StationByID(pear.Station))
	require.NoError(t, err)
	assert.Equal(t, -8*3600, func() int { _, off := time.Date(2026, 7, 1, 0, 0, 0, 0, cz.Loc).Zone(); return off }())
	assert.True(t, cz.FailSafe.Fallback)
	assert.Equal(t, 6.2, cz.FailSafe.FallbackET[6])
	assert.Equal(t, controllers.Window{Start: 20 * 60, End: 6 * 60}, cz.Windows[0])
	assert.InDelta(t, 120, cz.Soil.TAW(1.0), 1e-9)
	assert.Equal(t, 0.35, cz.Crop.Season.OffSeason)
	assert.Equal(t, controllers.DefaultPolicy, cz.Policy)

	paddock := &site.Zones[1]
	cz, err = paddock.Controller(site.StationByID(paddock.Station))
	require.NoError(t, err)
	assert.InDelta(t, 5.0, cz.System.Rate, 1e-12)
	assert.InDelta(t, 3333.33, cz.Flow(), 0.01)
	assert.Equal(t, 0.30, cz.Crop.Season.OffSeason, "off-season Kc defaults to kc_ini")
	assert.True(t, cz.Holds.HasFrost)
	assert.Equal(t, 6*time.Hour, cz.Holds.RainLookback)
	assert.Equal(t, controllers.Sprinkler, cz.System.Kind)
	assert.True(t, paddock.AcceptsReference("short"))
	assert.False(t, paddock.AcceptsReference("tall"))
	assert.Equal(t, controllers.Source{ID: "river-pump", MaxValves: 2, MaxFlow: 4000}, site.Sources[0].Controller())
}

// TestWarnConfigs loads every testdata/config/warn-*.yaml, which is valid
// but has one implausible figure, and compares its warnings with the paired
// warn-*.txt exactly (rewritten with -update): one warning per file.
func TestWarnConfigs(t *testing.T) {
	checkGolden(t, configDir, "warn-*.yaml", func(t *testing.T, f string) string {
		c, err := Load(f)
		require.NoError(t, err, "a warn-*.yaml must load")
		ws := c.Warnings()
		assert.Len(t, ws, 1, "one warning per file")
		return strings.Join(ws, "\n")
	})
}

// TestShippedExamplesHaveNoWarnings keeps the examples plausible: a warning
// there is fixed in the example, not by weakening the rule.
func TestShippedExamplesHaveNoWarnings(t *testing.T) {
	for _, f := range []string{
		filepath.Join(configDir, "farm.yaml"),
		filepath.Join(configDir, "minimal.yaml"),
		filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml"),
		filepath.Join("..", "..", "deploy", "etpulse.example.yaml"),
	} {
		c, err := Load(f)
		require.NoError(t, err, f)
		assert.Empty(t, c.Warnings(), f)
	}
}
