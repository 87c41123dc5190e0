package report

import (
	"bytes"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/store"
)

// hoursRange serves one day of hourly zone steps: ET 0.5 mm, Kc 0.8, and
// Ks 1 for the first 12 hours and 0.5 for the rest.
func hoursRange(day time.Time) store.RangeFunc {
	var pts []store.Point
	for h := 0; h < 24; h++ {
		ks := 1.0
		if h >= 12 {
			ks = 0.5
		}
		p := store.ZonePoint("farm", "block", day.Add(time.Duration(h)*time.Hour), map[string]any{
			"kc": 0.8, "ks": ks, "et_mm": 0.5, "etc_mm": ks * 0.8 * 0.5, "depletion_mm": 30.0, "eff_rain_mm": 0.0,
		})
		p.Notes = map[string]string{"kind": "hour"}
		pts = append(pts, p)
	}
	return func(f store.Filter, fn func(store.Point) error) error {
		for _, p := range pts {
			if !p.Time.Before(f.From) && p.Time.Before(f.To) {
				if err := fn(p); err != nil {
					return err
				}
			}
		}
		return nil
	}
}

// The morning report's deficit: 1 - Σ Ks Kc ETo / Σ Kc ETo (FAO-56 eq.
// 80/81 against eq. 56): 12 h at Ks 1 and 12 h at Ks 0.5 give 1 - 0.75 =
// 0.25; inside a stage replacing 0.6 of ETc the intended deficit is 0.4 and
// the 12 stress hours are intended; outside it, none is.
func TestReportDeficitAgainstIntended(t *testing.T) {
	day := time.Date(2026, 9, 10, 0, 0, 0, 0, time.UTC)
	cfg := &config.Zone{ID: "block", Station: "mast",
		DeficitStages: []config.ZoneDeficitStage{{Name: "post-harvest", From: "09-01", To: "10-31", ReplaceFraction: 0.6}}}
	z, err := zoneDay(hoursRange(day), "farm", cfg, 0, day)
	require.NoError(t, err)
	require.NotNil(t, z.Deficit)
	require.InDelta(t, 0.25, *z.Deficit, 1e-9)
	require.Equal(t, "post-harvest", z.Stage)
	require.NotNil(t, z.IntendedDeficit)
	require.InDelta(t, 0.4, *z.IntendedDeficit, 1e-9)
	require.Equal(t, 12, z.StressHours)
	require.Equal(t, 12, z.IntendedStressHours)
	var buf bytes.Buffer
	require.NoError(t, Write(&buf, Report{Site: "farm", Date: "2026-09-10", Zones: []Zone{z}}, "text"))
	require.Contains(t, buf.String(), "block  deficit 25 %, intended 40 % (stage post-harvest); stress 12 h, all intended")

	day = time.Date(2026, 8, 10, 0, 0, 0, 0, time.UTC)
	z, err = zoneDay(hoursRange(day), "farm", cfg, 0, day)
	require.NoError(t, err)
	require.Empty(t, z.Stage)
	require.Zero(t, z.IntendedStressHours)
	require.InDelta(t, 0.25, *z.Deficit, 1e-9)
}
