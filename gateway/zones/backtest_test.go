package zones

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// syntheticHours is an invented fortnight at the example farm: a clear-sky
// shaped reference ET (daily total about 6 mm), with a 25 mm storm on day 6.
func syntheticHours(start time.Time, days int) []hourly.Record {
	var out []hourly.Record
	for h := 0; h < days*24; h++ {
		t := start.Add(time.Duration(h) * time.Hour)
		hour := t.Hour()
		et := 0.0
		if hour >= 6 && hour < 18 {
			et = 6 * math.Pi / 24 * math.Sin(math.Pi*(float64(hour-6)+0.5)/12) // integrates to ~6 mm/day
		}
		rain := 0.0
		if h/24 == 5 && hour >= 14 && hour < 19 {
			rain = 5
		}
		r := record(t, et, rain)
		r.Site = "brackenby"
		out = append(out, r)
	}
	return out
}

func TestBacktestSeason(t *testing.T) {
	cfg, err := config.Load(filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml"))
	require.NoError(t, err)
	db, err := state.Open(filepath.Join(t.TempDir(), "bt.db"))
	require.NoError(t, err)
	defer db.Close()
	bt, err := NewBacktest(cfg, db, nil)
	require.NoError(t, err)

	loc := time.FixedZone("UTC-8", -8*3600)
	for _, rec := range syntheticHours(time.Date(2026, 7, 1, 0, 0, 0, 0, loc), 14) {
		require.NoError(t, bt.HandleHour(nil, rec))
	}
	rows := bt.Rows()
	totals := bt.Totals()
	require.Len(t, totals, 2)
	var buf bytes.Buffer
	require.NoError(t, WriteDays(&buf, rows))
	require.NoError(t, WriteTotals(&buf, totals))
	t.Log("\n" + buf.String())

	for _, tot := range totals {
		// Water is conserved over the season (FAO-56 eq. 85 summed).
		lhs := tot.ETc - tot.EffRain - tot.CreditedMM
		rhs := tot.EndDepletion - tot.StartDepletion - tot.Drainage
		assert.InDelta(t, lhs, rhs, 1e-6, tot.Zone)
		assert.Greater(t, tot.Runs, 0, "%s was watered", tot.Zone)
		assert.Greater(t, tot.CreditedMM, 0.0, tot.Zone)
		assert.GreaterOrEqual(t, tot.Days, 14)
	}
	caps := map[string]int{"pear-block-2": 540, "east-paddock": 420}
	for _, r := range rows {
		assert.LessOrEqual(t, r.Minutes, float64(caps[r.Zone]), "%s %s", r.Zone, r.Day)
	}
	// The storm day: 25 mm measured; effective 0.8 (5 - 0.5) x 5 = 18 mm.
	for _, r := range rows {
		if r.Day == "2026-07-06" {
			assert.InDelta(t, 25, r.Rain, 1e-9)
			assert.InDelta(t, 18, r.EffRain, 1e-9)
		}
	}
}

func TestBacktestReportFiles(t *testing.T) {
	bt := exampleBacktest(t)
	loc := time.FixedZone("UTC-8", -8*3600)
	for _, rec := range syntheticHours(time.Date(2026, 7, 1, 0, 0, 0, 0, loc), 3) {
		require.NoError(t, bt.HandleHour(nil, rec))
	}
	path := filepath.Join(t.TempDir(), "days.txt")
	var sum bytes.Buffer
	require.NoError(t, bt.Report(path, true, &sum))
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	lines := strings.Split(strings.TrimSpace(string(b)), "\n")
	assert.Len(t, lines, 1+2*3, "header and one row per zone and day")
	assert.Contains(t, lines[0], "credited_mm")
	assert.Contains(t, sum.String(), "pear-block-2")
	assert.Contains(t, sum.String(), "end_dep_mm")

	none, closeNone, err := OpenBacktest(testConfigNoZones(t))
	require.NoError(t, err)
	defer closeNone()
	assert.Nil(t, none)
}

func testConfigNoZones(t *testing.T) *config.Config {
	c, err := config.Load(filepath.Join("..", "..", "testdata", "config", "minimal.yaml"))
	require.NoError(t, err)
	return c
}

// TestBacktestDecidesWithoutFutureET: every scheduler pass runs at a moment
// the live gateway could have reached, so a run is never planned from an
// hour that had not closed yet (its end plus close_grace).
func TestBacktestDecidesWithoutFutureET(t *testing.T) {
	bt := exampleBacktest(t)
	var latest time.Time // end of the latest hour stepped
	planned := 0
	bt.svc.o.OnEvent = func(e Event) {
		bt.event(e)
		switch e.Kind {
		case EventStep:
			if e.Step.End.After(latest) {
				latest = e.Step.End
			}
			now := bt.clock.Now()
			assert.False(t, now.Before(e.Step.End.Add(2*time.Minute)), "hour %v stepped at %v, before it could close", e.Step.Start, now)
		case EventPlanned:
			planned++
			assert.False(t, e.Time.Before(latest.Add(2*time.Minute)), "planned at %v with the hour ending %v already applied", e.Time, latest)
		}
	}
	loc := time.FixedZone("UTC-8", -8*3600)
	for _, rec := range syntheticHours(time.Date(2026, 7, 1, 0, 0, 0, 0, loc), 10) {
		require.NoError(t, bt.HandleHour(nil, rec))
	}
	assert.Greater(t, planned, 0)
}

// TestBacktestCountsOnlyWaterThatRan: cycles withdrawn by a hold before
// they were sent are not runs, minutes or gross water; they are counted
// apart. A cycle stopped by the hold counts the minutes it ran.
func TestBacktestCountsOnlyWaterThatRan(t *testing.T) {
	bt := exampleBacktest(t)
	loc := time.FixedZone("UTC-8", -8*3600)
	hours := syntheticHours(time.Date(2026, 7, 1, 0, 0, 0, 0, loc), 14)
	var firstPlan *controllers.Command
	bt.svc.o.OnEvent = func(e Event) {
		bt.event(e)
		if e.Kind == EventPlanned && e.Zone == "east-paddock" && firstPlan == nil && e.Command.Cycles > 1 {
			c := *e.Command
			firstPlan = &c
		}
	}
	held := false
	for _, rec := range hours {
		require.NoError(t, bt.HandleHour(nil, rec))
		if firstPlan != nil && !held {
			// Hold the site 30 minutes into the first cycle.
			r, err := bt.Hold("brackenby", []byte(`{"id":"h","action":"hold","hours":12}`), firstPlan.Start.Add(30*time.Minute))
			require.NoError(t, err)
			require.True(t, r.OK, r.Error)
			held = true
		}
	}
	require.NotNil(t, firstPlan, "the paddock got a multi-cycle run")
	var day DayRow
	for _, r := range bt.Rows() {
		if r.Zone == "east-paddock" && r.Day == firstPlan.Start.In(loc).Format("2006-01-02") {
			day = r
		}
	}
	assert.Greater(t, day.Cancelled, 0, "the later cycles were withdrawn")
	assert.Greater(t, day.CancelledMinutes, 0)
	// The stopped first cycle ran 30 minutes (the hold's stop reaches the
	// valve at once).
	assert.InDelta(t, 30, day.Minutes, 1e-9)
	assert.Equal(t, 1, day.Runs)
	assert.InDelta(t, 30.0/60*5, day.GrossMM, 1e-9)
}

// exampleBacktest is a backtest of the example farm's zones in a temporary
// state file removed when the test ends.
func exampleBacktest(t *testing.T) *Backtest {
	t.Helper()
	return backtestWith(t, func(*config.Config) {})
}
