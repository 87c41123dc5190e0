package controllers

import (
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/hourly"
)

// The steps below follow FAO-56 eq. 85 (Dr,i = Dr,i-1 - (P-RO)i - Ii + ETc,i + DPi)
// with ETc = Ks Kc ETo (eq. 81) and Ks by eq. 84, on the maize/loam zone
// (TAW 130 mm, RAW 71.5 mm, Kc 1.2; table values from memory, see maizeZone).
// Each expected value is worked by hand in the comment.
func TestStepHourHandWorked(t *testing.T) {
	z := maizeZone()
	require.NoError(t, z.Validate())
	st := &State{Depletion: 60}

	// Hour 0: ET 0.5, Ks 1 (60 < 71.5): ETc = 1.2 x 0.5 = 0.6; Dr = 60.6.
	s, ok, err := z.StepHour(st, validHour(0, 0.5, 0))
	require.NoError(t, err)
	require.True(t, ok)
	assert.InDelta(t, 0.6, s.ETc, 1e-12)
	assert.Equal(t, 1.0, s.Ks)
	assert.InDelta(t, 60.6, s.Depletion, 1e-12)
	assert.InDelta(t, 130, s.TAW, 1e-12)
	assert.InDelta(t, 71.5, s.RAW, 1e-12)

	// Hour 1: ET 0.75: ETc 0.9; Dr = 61.5.
	s, _, _ = z.StepHour(st, validHour(1, 0.75, 0))
	assert.InDelta(t, 61.5, s.Depletion, 1e-12)

	// Hour 2: rain 10 mm, effective 0.8 (10 - 0.5) = 7.6; ET 0.1, ETc 0.12;
	// Dr = 61.5 + 0.12 - 7.6 = 54.02.
	s, _, _ = z.StepHour(st, validHour(2, 0.1, 10))
	assert.InDelta(t, 7.6, s.EffRain, 1e-12)
	assert.InDelta(t, 54.02, s.Depletion, 1e-9)
	assert.Zero(t, s.Drainage)

	// Revision of hour 0 (ET 0.5 -> 0.8): the difference 1.2 x 0.3 = 0.36 is
	// applied with the Ks used then; Dr = 54.38.
	in := validHour(0, 0.8, 0)
	in.Revision = 1
	s, ok, err = z.StepHour(st, in)
	require.NoError(t, err)
	require.True(t, ok)
	assert.InDelta(t, 0.36, s.ETc, 1e-12)
	assert.InDelta(t, 0.3, s.ET, 1e-12)
	assert.InDelta(t, 54.38, s.Depletion, 1e-9)
	// The hour's totals after the revision: ET 0.8, ETc 0.6 + 0.36 = 0.96.
	assert.InDelta(t, 0.8, s.Hour.ET, 1e-12)
	assert.InDelta(t, 0.96, s.Hour.ETc, 1e-12)
	assert.Equal(t, 1, s.Hour.Revision)
	// The same revision again changes nothing.
	_, ok, err = z.StepHour(st, in)
	require.NoError(t, err)
	assert.False(t, ok)
	assert.InDelta(t, 54.38, st.Depletion, 1e-9)
}

func TestStepHourStressAndDrainage(t *testing.T) {
	z := maizeZone()
	// Stress: Dr = 100 > RAW: Ks = 30 / 58.5 = 0.512821 (eq. 84);
	// ETc = 0.512821 x 1.2 x 0.5 = 0.307692; Dr = 100.307692.
	st := &State{Depletion: 100}
	s, _, err := z.StepHour(st, validHour(0, 0.5, 0))
	require.NoError(t, err)
	assert.InDelta(t, 0.512821, s.Ks, 1e-6)
	assert.InDelta(t, 0.307692, s.ETc, 1e-6)
	assert.InDelta(t, 100.307692, s.Depletion, 1e-6)

	// Drainage: Dr = 5, rain 20 mm -> effective 0.8 x 19.5 = 15.6; no ET:
	// 5 - 15.6 = -10.6 -> Dr = 0, DP = 10.6 (eq. 88).
	st = &State{Depletion: 5}
	s, _, err = z.StepHour(st, validHour(0, 0, 20))
	require.NoError(t, err)
	assert.Zero(t, s.Depletion)
	assert.InDelta(t, 10.6, s.Drainage, 1e-9)

	// Credit: 30 mm on Dr 54.02 -> 24.02; then 60 mm -> 0 with DP 35.98.
	st = &State{Depletion: 54.02, EtcSinceRun: 9}
	s, err = z.Credit(st, "x", 30, validHour(1, 0, 0).Start)
	require.NoError(t, err)
	assert.InDelta(t, 24.02, s.Depletion, 1e-9)
	assert.Zero(t, st.EtcSinceRun)
	s, _ = z.Credit(st, "y", 60, validHour(1, 0, 0).Start)
	assert.Zero(t, s.Depletion)
	assert.InDelta(t, 35.98, s.Drainage, 1e-9)
	_, err = z.Credit(st, "z", -1, validHour(1, 0, 0).Start)
	assert.ErrorIs(t, err, ErrInput)
}

func TestStepHourNeverAboveTAW(t *testing.T) {
	// A tiny TAW (sand, 0.1 m roots: 1000 x 0.05 x 0.1 = 5 mm) and a big
	// hour: the crop cannot take more than is left.
	z := maizeZone()
	z.Soil = Soil{FieldCapacity: 0.10, WiltingPoint: 0.05, RootMax: 0.1, P: 0.5}
	st := &State{Depletion: 4.9}
	s, _, err := z.StepHour(st, validHour(0, 3, 0))
	require.NoError(t, err)
	assert.InDelta(t, 5.0, s.Depletion, 1e-12)
	assert.InDelta(t, 0.1, s.ETc, 1e-9) // Ks at 4.9: (5-4.9)/(0.5 x 5) = 0.04 -> 0.04 x 3.6 = 0.144, capped at 0.1
}

func TestFailSafeHold(t *testing.T) {
	z := maizeZone() // tolerates 3 hours, then holds
	st := &State{Depletion: 80}
	_, _, err := z.StepHour(st, validHour(0, 0.5, 0))
	require.NoError(t, err)
	d := st.Depletion
	for h := 1; h <= 5; h++ {
		s, e := hourAt(h)
		step, ok, err := z.StepHour(st, HourInput{Start: s, End: e})
		require.NoError(t, err)
		require.True(t, ok)
		assert.True(t, step.Missing)
		assert.False(t, step.Fallback)
		assert.Zero(t, step.ETc, "no guessed deficit in hold mode")
	}
	assert.Equal(t, d, st.Depletion)
	_, end := hourAt(3) // last valid end is hour 1 start; 3 h later is tolerated
	assert.False(t, z.Stale(st, end))
	_, end = hourAt(4)
	assert.True(t, z.Stale(st, end))
	r, alert := z.Blocked(st, Holds{}, end)
	assert.Contains(t, r, "no valid ET")
	assert.True(t, alert)
}

func TestFailSafeFallback(t *testing.T) {
	z := maizeZone()
	z.FailSafe.Fallback = true
	for i := range z.FailSafe.FallbackET {
		z.FailSafe.FallbackET[i] = 6 // mm/day
	}
	require.NoError(t, z.Validate())
	st := &State{Depletion: 20}
	_, _, err := z.StepHour(st, validHour(0, 0.5, 0)) // valid until hour 1 start
	require.NoError(t, err)
	var steps []Step
	for h := 1; h <= 5; h++ {
		s, e := hourAt(h)
		step, _, err := z.StepHour(st, HourInput{Start: s, End: e})
		require.NoError(t, err)
		steps = append(steps, step)
	}
	// Hours 1-3 end within 3 h of the last valid hour: missing, no ET.
	for _, s := range steps[:3] {
		assert.True(t, s.Missing)
		assert.Zero(t, s.ETc)
	}
	// Hours 4-5: fallback 6 mm/day / 24 = 0.25 mm/h, ETc = 1.2 x 0.25 = 0.3.
	for _, s := range steps[3:] {
		assert.True(t, s.Fallback)
		assert.False(t, s.Missing)
		assert.InDelta(t, 0.25, s.ET, 1e-12)
		assert.InDelta(t, 0.3, s.ETc, 1e-12)
	}
	r, _ := z.Blocked(st, Holds{}, steps[4].End)
	assert.Empty(t, r, "fallback zones keep deciding")
	assert.True(t, z.Stale(st, steps[4].End))
}

func TestStepHourBadInput(t *testing.T) {
	z := maizeZone()
	st := &State{}
	in := validHour(0, 0.5, -1)
	_, _, err := z.StepHour(st, in)
	assert.ErrorIs(t, err, ErrInput)
	assert.Contains(t, err.Error(), "rain")
	in = validHour(0, 0.5, 0)
	in.End = in.Start
	_, _, err = z.StepHour(st, in)
	assert.ErrorIs(t, err, ErrInput)
}

func TestCoverFactor(t *testing.T) {
	z := maizeZone()
	z.Cover = 0.7
	st := &State{}
	s, _, err := z.StepHour(st, validHour(0, 1, 0))
	require.NoError(t, err)
	assert.InDelta(t, 0.7, s.ET, 1e-12)
	assert.InDelta(t, 0.84, s.ETc, 1e-12) // 1.2 x 0.7
}

func TestInputFromRecord(t *testing.T) {
	s, e := hourAt(0)
	rec := hourly.Record{Start: s, End: e, Revision: 2, Rain: 1.2,
		Stats:  map[hourly.Quantity]hourly.Stats{hourly.AirTemp: {Count: 12, Mean: 3.5}, hourly.Wind: {Count: 12, Mean: 4.1}},
		Inputs: hourly.Hour{AirTemp: 3.5, Wind2: 3.2}}
	// Incomplete: no ET; temperature and sensor-height wind from the statistics.
	in := InputFromRecord(rec)
	assert.False(t, in.Valid)
	assert.Equal(t, HourInput{Start: s, End: e, Revision: 2, Rain: 1.2, AirTemp: 3.5, HasTemp: true, Wind2: 4.1, HasWind: true}, in)
	// Complete: ET and the 2 m wind.
	rec.Complete, rec.Result = true, &hourly.Result{ET: 0.42}
	in = InputFromRecord(rec)
	assert.True(t, in.Valid)
	assert.Equal(t, 0.42, in.ET)
	assert.Equal(t, 3.2, in.Wind2)
	// No temperature samples: unknown, not 0 °C.
	delete(rec.Stats, hourly.AirTemp)
	assert.False(t, InputFromRecord(rec).HasTemp)
	// An hour whose ET rests on a filled input carries the method along.
	rec.Fill = "hargreaves-samani-rs"
	assert.Equal(t, "hargreaves-samani-rs", InputFromRecord(rec).Fill)
}

// A step driven by an estimated hour says so; the estimate still counts as
// valid ET (it is a named, alerted method, not a silent fill).
func TestStepMarksFilledHour(t *testing.T) {
	z := maizeZone()
	st := &State{Depletion: 60}
	in := validHour(0, 0.5, 0)
	in.Fill = "hargreaves-samani-rs"
	s, ok, err := z.StepHour(st, in)
	require.NoError(t, err)
	require.True(t, ok)
	assert.Equal(t, "hargreaves-samani-rs", s.Fill)
	assert.False(t, s.Missing)
	assert.InDelta(t, 0.6, s.ETc, 1e-12) // 1.2 x 0.5, as for a measured hour

	s, _, _ = z.StepHour(st, validHour(1, 0.5, 0))
	assert.Empty(t, s.Fill)
}
