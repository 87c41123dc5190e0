package zones

import (
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
)

// seasonTotals runs the backtest of cfg over days of the invented
// fortnight's weather repeated (a clear-sky shaped reference ET of about
// 6 mm/day, a 25 mm storm in each fortnight) and returns the totals.
func seasonTotals(t *testing.T, cfg *config.Config, days int) []ZoneTotals {
	t.Helper()
	bt, closeBT, err := OpenBacktest(cfg)
	require.NoError(t, err)
	defer closeBT()
	loc := time.FixedZone("UTC-8", -8*3600)
	for _, rec := range syntheticHours(time.Date(2026, 6, 1, 0, 0, 0, 0, loc), days) {
		require.NoError(t, bt.HandleHour(nil, rec))
	}
	return bt.Totals()
}

// TestSeasonNoStressOnExamples: the shipped example zones, over a 75-day
// summer of invented weather, water before the crop is stressed: zero
// stress hours, with the trigger as shipped and with the default trigger
// (RAW). The figures are logged for the release notes (go test -run
// TestSeasonNoStressOnExamples -v ./gateway/zones).
func TestSeasonNoStressOnExamples(t *testing.T) {
	if testing.Short() {
		t.Skip("a 75-day season")
	}
	path := filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml")
	var report strings.Builder
	for _, variant := range []string{"as shipped", "trigger RAW"} {
		cfg, err := config.Load(path)
		require.NoError(t, err)
		if variant == "trigger RAW" {
			for i := range cfg.Sites[0].Zones {
				cfg.Sites[0].Zones[i].Soil.TriggerMM = 0
			}
		}
		for _, tot := range seasonTotals(t, cfg, 75) {
			fmt.Fprintf(&report, "%-12s %-13s runs %3d  gross %6.1f mm  credited %6.1f mm  ETc %6.1f mm  stress %d h\n",
				variant, tot.Zone, tot.Runs, tot.GrossMM, tot.CreditedMM, tot.ETc, tot.StressHours)
			if tot.StressHours != 0 {
				t.Errorf("%s, %s: %d stress hours", variant, tot.Zone, tot.StressHours)
			}
		}
	}
	t.Log("\n" + report.String())
}
