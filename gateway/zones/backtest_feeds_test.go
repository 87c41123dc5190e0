package zones

import (
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/hourly"
)

var btLoc = time.FixedZone("UTC-8", -8*3600)

// backtestWith is a backtest of the example farm's zones with the
// configuration changed by edit first.
func backtestWith(t *testing.T, edit func(*config.Config)) *Backtest {
	t.Helper()
	cfg, err := config.Load(filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml"))
	require.NoError(t, err)
	edit(cfg)
	bt, closeBT, err := OpenBacktest(cfg)
	require.NoError(t, err)
	t.Cleanup(closeBT)
	return bt
}

// forecastSeason runs the invented fortnight (syntheticHours) for the
// pear block, with the storm of 6 July or without it, and with or without
// a forecast issued at 18:00 on 5 July of 25 mm between 14:00 and 19:00
// on 6 July at a probability of 0.9. It returns the pear block's totals
// and its day rows, and the largest depletion of an hour.
func forecastSeason(t *testing.T, storm, forecast bool) (ZoneTotals, map[string]DayRow, float64) {
	t.Helper()
	bt := backtestWith(t, func(c *config.Config) {
		c.Sites[0].Zones[0].Forecast = &config.ZoneForecast{}
	})
	peak := 0.0
	bt.svc.o.OnEvent = func(e Event) {
		bt.event(e)
		if e.Kind == EventStep && e.Zone == "pear-block-2" {
			peak = max(peak, e.Step.Depletion)
		}
	}
	issued := time.Date(2026, 7, 5, 18, 0, 0, 0, btLoc)
	fc, err := DecodeForecast(fmt.Appendf(nil, `{"issued":%q,"periods":[{"start":%q,"end":%q,"rain_mm":25,"rain_probability":0.9}]}`,
		issued.Format(time.RFC3339), time.Date(2026, 7, 6, 14, 0, 0, 0, btLoc).Format(time.RFC3339), time.Date(2026, 7, 6, 19, 0, 0, 0, btLoc).Format(time.RFC3339)))
	require.NoError(t, err)
	for _, rec := range syntheticHours(time.Date(2026, 7, 1, 0, 0, 0, 0, btLoc), 14) {
		if !storm {
			rec.Rain = 0
		}
		if forecast && rec.Start.Equal(issued) {
			require.NoError(t, bt.Forecast("brackenby", fc, issued))
		}
		require.NoError(t, bt.HandleHour(nil, rec))
	}
	days := map[string]DayRow{}
	for _, r := range bt.Rows() {
		if r.Zone == "pear-block-2" {
			days[r.Day] = r
		}
	}
	for _, tot := range bt.Totals() {
		if tot.Zone == "pear-block-2" {
			return tot, days, peak
		}
	}
	t.Fatal("no pear block")
	return ZoneTotals{}, nil, 0
}

// TestBacktestForecastRain: the forecast rows of a backtest reach the
// decision function as the forecast topic does live. The pear block (drip,
// trigger 10 mm, window 20:00-06:00, effective rain 0.8 of the rain above
// 0.5 mm an hour) is watered every night of the invented fortnight; the
// forecast of 5 July (25 mm on the 6th, 18 mm effective) covers the need
// of the night of the 5th, so that run is skipped.
//
// Figures of this backtest (pear block, 14 days; depletion peak = the
// largest depletion after an hour step):
//   - storm, no forecast: 12 runs, 69.6 mm gross, 9.3 mm drained, peak
//     8.7 mm, 0 stress hours;
//   - storm and forecast (the rain came): the run of the 5th skipped: 11
//     runs, 63.2 mm gross (6.4 mm saved), 3.6 mm drained, peak 13.0 mm
//     (trigger 10 mm, RAW 60 mm), 0 stress hours;
//   - no storm, no forecast: 13 runs, 79.2 mm gross, peak 8.7 mm;
//   - no storm, forecast (it was wrong): the run of the 5th skipped, the
//     next window waters 9.8 mm gross instead of 6.3 mm and the one after
//     9.2 mm instead of 6.4 mm: 12 runs, 79.2 mm gross (the same water),
//     peak 14.4 mm instead of 8.7 mm, 0 stress hours. The cost of the
//     wrong forecast is a day and a half above the trigger, well inside RAW.
func TestBacktestForecastRain(t *testing.T) {
	base, baseDays, basePeak := forecastSeason(t, true, false)
	came, cameDays, camePeak := forecastSeason(t, true, true)
	dryBase, dryBaseDays, dryPeak := forecastSeason(t, false, false)
	wrong, wrongDays, wrongPeak := forecastSeason(t, false, true)
	for _, s := range []struct {
		name string
		tot  ZoneTotals
		days map[string]DayRow
		peak float64
	}{{"storm", base, baseDays, basePeak}, {"storm+forecast", came, cameDays, camePeak}, {"dry", dryBase, dryBaseDays, dryPeak}, {"dry+forecast", wrong, wrongDays, wrongPeak}} {
		var b strings.Builder
		for _, d := range []string{"2026-07-04", "2026-07-05", "2026-07-06", "2026-07-07"} {
			r := s.days[d]
			fmt.Fprintf(&b, " %s runs %d gross %.1f dep %.1f;", d, r.Runs, r.GrossMM, r.Depletion)
		}
		t.Logf("%s: runs %d gross %.1f drained %.1f stress %d end %.1f peak %.1f;%s", s.name, s.tot.Runs, s.tot.GrossMM, s.tot.Drainage, s.tot.StressHours, s.tot.EndDepletion, s.peak, b.String())
	}
	// Without the forecast the night of the 5th waters; with it, it does not.
	assert.Equal(t, 1, baseDays["2026-07-05"].Runs)
	assert.Equal(t, 0, cameDays["2026-07-05"].Runs, "the run before the forecast rain is skipped")
	assert.Equal(t, 0, wrongDays["2026-07-05"].Runs)
	// The rain came: one night's water saved, less drained.
	assert.Equal(t, base.Runs-1, came.Runs)
	assert.Less(t, came.GrossMM, base.GrossMM)
	assert.Less(t, came.Drainage, base.Drainage)
	assert.Zero(t, came.StressHours)
	// The forecast was wrong: the next window waters more than it would
	// have, and the crop never reaches stress (RAW 60 mm).
	assert.Greater(t, wrongDays["2026-07-06"].GrossMM, dryBaseDays["2026-07-06"].GrossMM)
	assert.Zero(t, wrong.StressHours)
	assert.Greater(t, wrongDays["2026-07-05"].Depletion, dryBaseDays["2026-07-05"].Depletion)
	assert.InDelta(t, dryBase.GrossMM, wrong.GrossMM, 0.5, "the water is put back, not lost")
	assert.Greater(t, wrongPeak, dryPeak)
	assert.Less(t, wrongPeak, 60.0, "below RAW")
}

// TestBacktestProbeRow: a probe reading fed to the backtest (as the
// replay's probe rows are) corrects the zone's balance at the next hour
// step, through the same fusion as live.
func TestBacktestProbeRow(t *testing.T) {
	bt := backtestWith(t, func(c *config.Config) {
		st := c.Sites[0].StationByID("mast")
		st.Sensors = append(st.Sensors, config.Sensor{ID: "sm50", Topic: "brackenby/mast/sm50", Format: config.FormatNumber,
			Channel: config.Channel{Quantity: hourly.SoilWater, Unit: "%"}})
		c.Sites[0].Zones[0].Probes = &config.ZoneProbes{Sensors: []config.ZoneProbe{{Sensor: "sm50", DepthM: 0.5}}}
	})
	var steps []controllers.Step
	bt.svc.o.OnEvent = func(e Event) {
		bt.event(e)
		if e.Kind == EventStep && e.Zone == "pear-block-2" {
			steps = append(steps, *e.Step)
		}
	}
	start := time.Date(2026, 7, 1, 8, 0, 0, 0, btLoc)
	rec := record(start, 0.5, 0)
	rec.Site = "brackenby"
	// The probe reads 15 % (field capacity 23 %): 1000 (0.23 - 0.15) x 1.0
	// = 80 mm over the root zone, far drier than the model's 0.5 mm.
	bt.ObserveSample("brackenby", "mast", hourly.Sample{Sensor: "sm50", Quantity: hourly.SoilWater, Time: start.Add(50 * time.Minute), Value: 15}, start.Add(50*time.Minute))
	require.NoError(t, bt.HandleHour(nil, rec))
	require.Len(t, steps, 1)
	require.NotNil(t, steps[0].Probe, "the probe reading reached the fusion")
	assert.Greater(t, steps[0].Probe.CorrectionMM, 0.0)
	assert.Greater(t, steps[0].Depletion, 0.5+1)
	var row DayRow
	for _, r := range bt.Rows() {
		if r.Zone == "pear-block-2" {
			row = r
		}
	}
	assert.InDelta(t, steps[0].Depletion, row.Depletion, 1e-9, "the day row carries the corrected depletion")
}

// TestBacktestMeterRowFlowHigh: meter readings fed to the backtest during
// a run (as the replay's meter rows are) raise the flow-high alert through
// the same judgement as live (controllers.CheckFlow in Decide, after the
// meter's high_after delay, 2 min by default).
func TestBacktestMeterRowFlowHigh(t *testing.T) {
	bt := backtestWith(t, func(c *config.Config) {
		c.Sites[0].Meters = []config.Meter{{ID: "pear-meter", Zone: "pear-block-2"}}
	})
	var planned *controllers.Command
	var alerts []Event
	bt.svc.o.OnEvent = func(e Event) {
		bt.event(e)
		if e.Kind == EventPlanned && e.Zone == "pear-block-2" && planned == nil {
			c := *e.Command
			planned = &c
		}
		if e.Kind == EventAlert {
			alerts = append(alerts, e)
		}
	}
	flow := bt.svc.zones["brackenby/pear-block-2"].z.Flow()
	require.Greater(t, flow, 0.0)
	fed := false
	for _, rec := range syntheticHours(time.Date(2026, 7, 1, 0, 0, 0, 0, btLoc), 3) {
		require.NoError(t, bt.HandleHour(nil, rec))
		if planned != nil && !fed {
			// 40 % above the expected flow, every minute for 5 minutes
			// from the run's first minute.
			for i := 1; i <= 6; i++ {
				require.NoError(t, bt.Meter("brackenby", "pear-meter", 1.4*flow, true, planned.Start.Add(time.Duration(i)*time.Minute)))
			}
			fed = true
		}
	}
	require.True(t, fed, "the pear block got a run")
	var high []Event
	for _, e := range alerts {
		if strings.Contains(e.Text, "above the expected") {
			high = append(high, e)
		}
	}
	require.NotEmpty(t, high, "flow-high raised; alerts: %v", alerts)
	assert.Equal(t, "pear-block-2", high[0].Zone)
	assert.False(t, high[0].Time.Before(planned.Start.Add(2*time.Minute)), "raised after its delay")
	assert.False(t, high[0].Time.After(planned.Start.Add(6*time.Minute)), "raised during the readings")
}
