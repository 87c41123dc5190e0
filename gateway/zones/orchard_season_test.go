package zones

import (
	"fmt"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
)

// TestSeasonYoungDripOrchard runs the shipped drip pear block over the
// 40-day invented summer (from 1 June) of seasonTotals as a young orchard: the full-cover
// Kc curve and whole soil (as shipped), then with a canopy of 30 % ground
// cover at 2.5 m (Allen and Pereira 2009 density coefficient: Kd =
// min(1, 2 x 0.3, 0.3^(1/3.5)) = 0.6), then also with the drip wetting 35 %
// of the soil (FAO-56 Table 20 drip 0.3-0.4, from memory), and, for the
// other two capabilities, with a regulated-deficit stage and saline water.
// The trigger is RAW (trigger_mm unset) so the soil held sets the interval.
// Figures: go test -run TestSeasonYoungDripOrchard -v ./gateway/zones.
func TestSeasonYoungDripOrchard(t *testing.T) {
	if testing.Short() {
		t.Skip("a 40-day season, five times")
	}
	cover, typical, replace := 0.3, true, 0.6
	variants := []struct {
		name string
		edit func(z *config.Zone)
	}{
		{"full cover", func(z *config.Zone) {}},
		{"cover 0.3", func(z *config.Zone) {
			z.Crop.Canopy = &config.ZoneCanopy{Cover: &cover, HeightM: 2.5}
		}},
		{"cover+wetted", func(z *config.Zone) {
			z.Crop.Canopy = &config.ZoneCanopy{Cover: &cover, HeightM: 2.5}
			z.Soil.Wetted = &config.ZoneWetted{Typical: typical}
		}},
		{"cover+wetted+rdi", func(z *config.Zone) {
			z.Crop.Canopy = &config.ZoneCanopy{Cover: &cover, HeightM: 2.5}
			z.Soil.Wetted = &config.ZoneWetted{Typical: typical}
			z.DeficitStages = []config.ZoneDeficitStage{{Name: "late-summer", From: "06-20", To: "07-10", ReplaceFraction: replace}}
		}},
		{"cover+wetted+saline", func(z *config.Zone) {
			z.Crop.Canopy = &config.ZoneCanopy{Cover: &cover, HeightM: 2.5}
			z.Soil.Wetted = &config.ZoneWetted{Typical: typical}
			z.Salinity = &config.ZoneSalinity{WaterECdSm: 1.2, ThresholdECdSm: 1.7} // FAO-29 Table 4 pear ~1.7 (from memory)
		}},
	}
	got := map[string]ZoneTotals{}
	var report strings.Builder
	for _, v := range variants {
		cfg, err := config.Load(filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml"))
		require.NoError(t, err)
		site := &cfg.Sites[0]
		site.Zones = site.Zones[:1] // pear-block-2, drip
		z := &site.Zones[0]
		z.Soil.TriggerMM, z.Soil.RefillFraction = 0, 0.05
		v.edit(z)
		require.NoError(t, cfg.Validate(), v.name)
		tot := seasonTotals(t, cfg, 40)
		require.Len(t, tot, 1)
		got[v.name] = tot[0]
		x := tot[0]
		fmt.Fprintf(&report, "%-20s runs %3d  gross %6.1f mm  credited %6.1f mm  ETc %6.1f mm (unstressed %6.1f)  stress %4d h (intended %4d)  leach %5.1f mm\n",
			v.name, x.Runs, x.GrossMM, x.CreditedMM, x.ETc, x.ETcPot, x.StressHours, x.IntendedStressHours, x.Leach)
	}
	t.Log("\n" + report.String())
	full, cov, cw, rdi, sal := got["full cover"], got["cover 0.3"], got["cover+wetted"], got["cover+wetted+rdi"], got["cover+wetted+saline"]
	// Partial cover lowers demand and so the season's water.
	require.Less(t, cov.ETcPot, full.ETcPot*0.8)
	require.Less(t, cov.GrossMM, full.GrossMM)
	// Wetting a third of the soil holds a third of the water: more, smaller
	// runs for the same demand.
	require.Greater(t, cw.Runs, cov.Runs)
	// A regulated deficit puts back less water and its stress is intended.
	require.Less(t, rdi.CreditedMM, cw.CreditedMM)
	require.Greater(t, rdi.IntendedStressHours, 0)
	require.Equal(t, cw.StressHours, rdi.StressHours-rdi.IntendedStressHours, "no unintended stress added by the stage")
	// Saline water: more water applied, the extra drains as leaching.
	require.Greater(t, sal.GrossMM, cw.GrossMM)
	require.Greater(t, sal.Leach, 0.0)
}
