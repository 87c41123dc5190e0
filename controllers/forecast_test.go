package controllers

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// forecastZone is maizeZone refilled to 70 % of RAW (target 50.05 mm), using
// a forecast of at most 12 h of age whose rain counts from 5 mm effective at
// a probability of 60 %. The figures are invented test settings.
func forecastZone() *Zone {
	z := maizeZone()
	z.Soil.RefillFraction = 0.7
	z.Forecast = ForecastRules{MaxAge: 12 * time.Hour, RainMinMM: 5, RainMinProb: 0.6, Frost: true}
	return z
}

// sixHourly is a forecast issued at day 1 18:00 of 6-hour periods up to day 3
// 06:00, each with ETo 1.5 mm (0.25 mm/h), no rain, minimum 12 °C.
func sixHourly() *Forecast {
	f := &Forecast{Issued: at(1, 18, 0)}
	for s := at(1, 18, 0); s.Before(at(3, 6, 0)); s = s.Add(6 * time.Hour) {
		f.Periods = append(f.Periods, ForecastPeriod{Start: s, End: s.Add(6 * time.Hour), ETo: 1.5, HasETo: true, MinTempC: 12, HasMinTemp: true})
	}
	return f
}

// rainAt sets rain mm at probability prob on the period starting at s.
func (f *Forecast) rainAt(s time.Time, mm, prob float64) *Forecast {
	for i := range f.Periods {
		if f.Periods[i].Start.Equal(s) {
			f.Periods[i].RainMM, f.Periods[i].RainProb = mm, prob
		}
	}
	return f
}

func planWith(z *Zone, depletion float64, fc *Forecast) Plan {
	now := at(1, 21, 0)
	st := withWeather(&State{Depletion: depletion}, now)
	return planRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{}, fc)
}

func TestForecastRainSkipsRun(t *testing.T) {
	// Need 75 - 50.05 = 24.95 mm. 40 mm in 6 h at 80 %: effective
	// 6 x 0.8 x (40/6 - 0.5) = 29.6 mm covers it. Without the rain the
	// depletion would reach 75 + 32 h x 0.25 x 1.2 = 84.6 mm by the next
	// window's end, below TAW 130: the skip is safe.
	p := planWith(forecastZone(), 75, sixHourly().rainAt(at(2, 6, 0), 40, 0.8))
	assert.Empty(t, p.Commands)
	require.Len(t, p.Skips, 1)
	assert.Contains(t, p.Skips[0].Reason, "forecast issued 2026-07-01 18:00: 29.6 mm effective rain")
	assert.Contains(t, p.Skips[0].Reason, "covers the need of 25.0 mm")
}

func TestForecastRainShortensRun(t *testing.T) {
	// 30 mm in 6 h: 6 x 0.8 x (5 - 0.5) = 21.6 mm; need 24.95 - 21.6 =
	// 3.35 mm -> 3.35 / 0.75 / 5 x 60 = 53.6 -> 54 minutes.
	p := planWith(forecastZone(), 75, sixHourly().rainAt(at(2, 6, 0), 30, 0.8))
	require.Len(t, p.Commands, 1)
	assert.Equal(t, 54, p.Commands[0].Minutes)
	require.Len(t, p.Why, 1)
	assert.Contains(t, p.Why[0].Reason, "shortened by 21.6 mm of rain expected before 2026-07-02 21:00 (forecast issued 2026-07-01 18:00)")
}

func TestForecastRainBelowProbabilityIgnored(t *testing.T) {
	// 24.95 / 0.75 / 5 x 60 = 399.2 -> 400 minutes, as without a forecast.
	p := planWith(forecastZone(), 75, sixHourly().rainAt(at(2, 6, 0), 40, 0.5))
	require.Len(t, p.Commands, 1)
	assert.Equal(t, 400, p.Commands[0].Minutes)
	// Rain after the next window starts does not count either.
	p = planWith(forecastZone(), 75, sixHourly().rainAt(at(2, 0, 0).Add(24*time.Hour), 40, 0.9))
	require.Len(t, p.Commands, 1)
	assert.Equal(t, 400, p.Commands[0].Minutes)
}

func TestForecastRainNotReliedOnNearWiltingPoint(t *testing.T) {
	// 122 + 9.6 >= TAW 130: waiting for rain that may not come is refused.
	p := planWith(forecastZone(), 122, sixHourly().rainAt(at(2, 6, 0), 200, 0.9))
	require.Len(t, p.Commands, 1)
	assert.Contains(t, p.Why[0].Reason, "not relied on")
}

func TestForecastStaleIgnored(t *testing.T) {
	z := forecastZone()
	fc := sixHourly().rainAt(at(2, 6, 0), 40, 0.8)
	fc.Issued = at(1, 8, 0) // 13 h before now, max age 12 h
	now := at(1, 21, 0)
	st := withWeather(&State{Depletion: 75}, now)
	d := Decide(now, Input{Zones: []ZoneInput{{z, st}}, Forecast: fc})
	require.NotEmpty(t, d.Actions)
	assert.Equal(t, 400, d.Actions[0].Command.Minutes)
	assert.NotContains(t, d.Actions[0].Reason, "forecast")
	assert.Equal(t, "forecast issued 2026-07-01T16:00:00Z is 13h0m0s old, older than 12h0m0s: ignored", d.ForecastIgnored)

	fc.Issued = at(1, 18, 0)
	d = Decide(now, Input{Zones: []ZoneInput{{z, st}}, Forecast: fc})
	assert.Empty(t, d.ForecastIgnored)
	assert.Empty(t, d.Actions)
}

func TestForecastFrostHolds(t *testing.T) {
	z := forecastZone()
	z.Holds.HasFrost, z.Holds.FrostC = true, 0.5
	fc := sixHourly()
	fc.Periods[1].MinTempC = -1.5 // day 2 00:00-06:00, inside the window
	p := planWith(z, 75, fc)
	assert.Empty(t, p.Commands)
	require.Len(t, p.Skips, 1)
	assert.Equal(t, "forecast issued 2026-07-01 18:00: minimum -1.5 °C from 2026-07-02 00:00 below frost limit 0.5 °C", p.Skips[0].Reason)

	// A command planned before the forecast arrived is cancelled at send.
	now := at(1, 21, 0)
	st := withWeather(&State{Depletion: 75}, now)
	planned := planWith(z, 75, nil).Commands
	require.Len(t, planned, 1)
	d := Decide(now.Add(time.Minute), Input{Zones: []ZoneInput{{z, st}}, Ledger: planned, Forecast: fc})
	require.NotEmpty(t, d.Actions)
	assert.Equal(t, ActCancel, d.Actions[0].Kind)
	assert.Contains(t, d.Actions[0].Reason, "forecast issued")

	// Frost holds need the zone's frost limit.
	z.Holds.HasFrost = false
	require.Len(t, planWith(z, 75, fc).Commands, 1)
}

// A command planned but not yet sent is cancelled at its send when a
// forecast that came after the plan expects rain covering the need (the
// planning rule of TestForecastRainSkipsRun); one planned with the same
// forecast, shortened by its rain, is sent.
func TestForecastRainAfterPlanCancelsAtSend(t *testing.T) {
	z := forecastZone()
	now := at(1, 21, 0)
	st := withWeather(&State{Depletion: 75}, now)
	rain := sixHourly().rainAt(at(2, 6, 0), 40, 0.8)

	planned := planWith(z, 75, nil).Commands
	require.Len(t, planned, 1)
	d := Decide(now.Add(time.Minute), Input{Zones: []ZoneInput{{z, st}}, Ledger: planned, Forecast: rain})
	require.NotEmpty(t, d.Actions)
	assert.Equal(t, ActCancel, d.Actions[0].Kind)
	assert.Contains(t, d.Actions[0].Reason, "forecast issued 2026-07-01 18:00: 29.6 mm effective rain")

	shortening := sixHourly().rainAt(at(2, 6, 0), 30, 0.8)
	planned = planWith(z, 75, shortening).Commands
	require.Len(t, planned, 1)
	d = Decide(now.Add(time.Minute), Input{Zones: []ZoneInput{{z, st}}, Ledger: planned, Forecast: shortening})
	require.NotEmpty(t, d.Actions)
	assert.Equal(t, ActSend, d.Actions[0].Kind, "the rain the plan allowed for does not cancel it")
	assert.Equal(t, 54, d.Actions[0].Command.Minutes)
}

func TestForecastETcProjects(t *testing.T) {
	// Depletion 65 below the trigger 71.5, no recent ET: not due. Forecast
	// ETc to the next window's end: 32 h x 0.25 x 1.2 = 9.6 mm -> 74.6 mm,
	// above the trigger (FAO-56 eq. 56, ETc = Kc ETo): projected run.
	z := forecastZone()
	assert.Empty(t, planWith(z, 65, nil).Why)
	p := planWith(z, 65, sixHourly())
	require.Len(t, p.Commands, 1)
	assert.Equal(t, BasisProjected, p.Commands[0].Reason.Basis)
	assert.InDelta(t, 74.6, p.Commands[0].Reason.ProjectedMM, 1e-9)
	assert.Contains(t, p.Why[0].Reason, "with 9.6 mm forecast ETc (forecast issued 2026-07-01 18:00)")

	// A forecast that stops short of the horizon is not used for it.
	short := sixHourly()
	short.Periods = short.Periods[:4]
	assert.Empty(t, planWith(z, 65, short).Why)
}

func TestForecastValidate(t *testing.T) {
	require.NoError(t, sixHourly().Validate())
	bad := sixHourly()
	bad.Periods[2].RainProb = 80
	assert.ErrorContains(t, bad.Validate(), "forecast period 2: rain_probability: must be within 0-1, got 80")
	assert.ErrorContains(t, (&Forecast{}).Validate(), "forecast issued: missing")
	assert.ErrorContains(t, ForecastRules{MaxAge: 72 * time.Hour}.Validate(), "forecast max age")
}

// TestForecastRainSkipsRunWithoutETHistory is the demo's first evening:
// the gateway has run for 20 hours (fewer than the 24 RecentETc needs, no
// fallback ET), the forecast gives rain but no ETo, and the rain falls two
// hours after the window opens. 20 mm/h for 2 h at 90 %: effective
// 2 x 0.8 x (20 - 0.5) = 31.2 mm covers the need of 24.95 mm. What waiting
// costs is bounded by the worst-case reference ET (WorstCaseRefETPerDay,
// 15 mm/day): 75 + 32 h x 1.2 x 15/24 = 99 mm, below TAW 130: the skip is
// safe, and its reason says the worst case was assumed.
func TestForecastRainSkipsRunWithoutETHistory(t *testing.T) {
	now := at(1, 21, 0)
	st := &State{Depletion: 75}
	for h := 1; h <= 20; h++ {
		s, _ := hourAt(h)
		st.Hours = append(st.Hours, HourEntry{Start: s, Valid: true, ETcPot: 0.2, Wind2: 2, AirTemp: 20, HasWind: true, HasTemp: true})
	}
	st.LastValid = now
	fc := &Forecast{Issued: at(1, 12, 0), Periods: []ForecastPeriod{
		{Start: at(1, 23, 0), End: at(2, 0, 0), RainMM: 20, RainProb: 0.9},
		{Start: at(2, 0, 0), End: at(2, 1, 0), RainMM: 20, RainProb: 0.9},
	}}
	p := planRuns(now, []ZoneInput{{forecastZone(), st}}, nil, nil, Holds{}, fc)
	assert.Empty(t, p.Commands, "rain covering the need two hours after the window opens skips tonight's run")
	require.Len(t, p.Skips, 1)
	assert.Contains(t, p.Skips[0].Reason, "31.2 mm effective rain")
	assert.Contains(t, p.Skips[0].Reason, "covers the need of 25.0 mm")
	assert.Contains(t, p.Skips[0].Reason, "worst-case reference ET of 15 mm/day")

	// Near the wilting point even the worst case refuses, and says so:
	// 110 + 24 >= 130.
	st.Depletion = 110
	p = planRuns(now, []ZoneInput{{forecastZone(), st}}, nil, nil, Holds{}, fc)
	require.Len(t, p.Commands, 1)
	assert.Contains(t, p.Why[0].Reason, "not relied on")
}
