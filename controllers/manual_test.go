package controllers

import (
	"math"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// Manual water on the maize/loam zone (TAW 130 mm, FAO-56 eq. 82 with the
// loam figures of fao56_test.go, from memory; sprinkler 5 mm/h at
// efficiency 0.75 and 20000 m2, invented farm figures). The depths follow
// FAO-56 eq. 85 (Dr falls by the net irrigation) and eq. 88 (water above
// field capacity percolates); each expected value is worked by hand.
func TestApplyWaterCreditsNetDepth(t *testing.T) {
	z := maizeZone()
	now := time.Date(2026, 7, 1, 12, 0, 0, 0, stdLoc)
	for _, tc := range []struct {
		name   string
		w      ManualWater
		net    float64
		kind   StepKind
		before float64
	}{
		// Net depth as given: 60 - 12 = 48.
		{"net mm", ManualWater{Kind: ManualApplied, Amount: 12, Unit: UnitNetMM}, 12, StepManual, 60},
		// Gross minutes: 90/60 x 5 x 0.75 = 5.625 mm net; 60 - 5.625 = 54.375.
		{"minutes", ManualWater{Kind: ManualApplied, Amount: 90, Unit: UnitMinutes}, 5.625, StepManual, 60},
		// Gross volume: 200000 L / 20000 m2 = 10 mm gross x 0.75 = 7.5 mm net.
		{"volume", ManualWater{Kind: ManualFrost, Amount: 200000, Unit: UnitVolumeL}, 7.5, StepFrost, 60},
	} {
		t.Run(tc.name, func(t *testing.T) {
			st := &State{Depletion: tc.before, EtcSinceRun: 4}
			s, err := z.ApplyWater(st, tc.w, now)
			require.NoError(t, err)
			assert.Equal(t, tc.kind, s.Kind)
			assert.InDelta(t, tc.net, s.Irrigation, 1e-12)
			assert.InDelta(t, tc.before-tc.net, s.Depletion, 1e-12)
			assert.InDelta(t, tc.before-tc.net, st.Depletion, 1e-12)
			assert.Zero(t, s.Drainage)
			assert.Zero(t, st.EtcSinceRun, "a watering restarts the ET since the last run")
			assert.True(t, s.Start.Equal(now))
		})
	}
}

// Frost protection may put more than the depletion into the soil: the
// surplus percolates (FAO-56 eq. 88). Dr 20, 150 mm net (above TAW 130, within
// 2 x TAW): Dr 0, DP 130.
func TestApplyWaterFrostSurplusDrains(t *testing.T) {
	z := maizeZone()
	st := &State{Depletion: 20}
	now := time.Date(2026, 3, 20, 7, 0, 0, 0, stdLoc)
	s, err := z.ApplyWater(st, ManualWater{Kind: ManualFrost, Amount: 150, Unit: UnitNetMM, At: now.Add(-3 * time.Hour)}, now)
	require.NoError(t, err)
	assert.Equal(t, StepFrost, s.Kind)
	assert.Zero(t, s.Depletion)
	assert.InDelta(t, 130, s.Drainage, 1e-12)
}

// Implausible records are refused with the problem and the likely fix, and
// leave the balance as it was.
func TestApplyWaterRefusesImplausible(t *testing.T) {
	z := maizeZone()
	now := time.Date(2026, 7, 1, 12, 0, 0, 0, stdLoc)
	for _, tc := range []struct {
		name string
		w    ManualWater
		want []string
	}{
		{"negative", ManualWater{Kind: ManualApplied, Amount: -3, Unit: UnitNetMM}, []string{"mm: must be > 0", "-3"}},
		{"zero", ManualWater{Kind: ManualApplied, Amount: 0, Unit: UnitMinutes}, []string{"minutes: must be > 0"}},
		{"nan", ManualWater{Kind: ManualApplied, Amount: math.NaN(), Unit: UnitVolumeL}, []string{"volume_l: must be > 0", "NaN"}},
		{"inf", ManualWater{Kind: ManualFrost, Amount: math.Inf(1), Unit: UnitNetMM}, []string{"must be > 0"}},
		// 5.5 in typed as mm would pass; 140 mm > TAW 130 is refused.
		{"above TAW", ManualWater{Kind: ManualApplied, Amount: 140, Unit: UnitNetMM}, []string{"140.0 mm net is more than 130.0 mm (TAW 130.0 mm)", "check the unit"}},
		// 2100 minutes / 60 x 5 x 0.75: hours typed as minutes over a day.
		{"minutes over a day", ManualWater{Kind: ManualApplied, Amount: 2100, Unit: UnitMinutes}, []string{"minutes: must be <= 1440"}},
		// 4,000,000 L / 20000 m2 x 0.75 = 150 mm net > TAW.
		{"volume above TAW", ManualWater{Kind: ManualApplied, Amount: 4e6, Unit: UnitVolumeL}, []string{"150.0 mm net is more than 130.0 mm"}},
		// 270 mm > 2 x TAW = 260 for frost protection.
		{"frost above 2 TAW", ManualWater{Kind: ManualFrost, Amount: 270, Unit: UnitNetMM}, []string{"more than 260.0 mm (2 x TAW 130.0 mm)"}},
		{"unit", ManualWater{Kind: ManualApplied, Amount: 3, Unit: "inch"}, []string{`unit: must be mm, minutes or volume_l, got "inch"`}},
		{"kind", ManualWater{Kind: "rain", Amount: 3, Unit: UnitNetMM}, []string{`kind: must be applied, frost_protection or depletion_reset, got "rain"`}},
		{"reset above TAW", ManualWater{Kind: ManualReset, Depletion: 131}, []string{"depletion_mm: must be within 0-130.0 mm", "not a water content"}},
		{"reset negative", ManualWater{Kind: ManualReset, Depletion: -1}, []string{"depletion_mm: must be within"}},
		{"reset nan", ManualWater{Kind: ManualReset, Depletion: math.NaN()}, []string{"depletion_mm: must be within"}},
		{"future", ManualWater{Kind: ManualApplied, Amount: 3, Unit: UnitNetMM, At: now.Add(6 * time.Minute)}, []string{"time: 2026-07-01T20:06:00Z is in the future"}},
		{"too old", ManualWater{Kind: ManualReset, Depletion: 3, At: now.Add(-73 * time.Hour)}, []string{"more than 72 h ago"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			st := &State{Depletion: 60, EtcSinceRun: 4}
			_, err := z.ApplyWater(st, tc.w, now)
			require.Error(t, err)
			assert.ErrorIs(t, err, ErrInput)
			for _, w := range tc.want {
				assert.Contains(t, err.Error(), w)
			}
			assert.Equal(t, State{Depletion: 60, EtcSinceRun: 4}, *st, "nothing changed")
		})
	}
	// Within the limits: exactly TAW, 4 minutes ahead, 72 h back.
	st := &State{Depletion: 60}
	_, err := z.ApplyWater(st, ManualWater{Kind: ManualApplied, Amount: 130, Unit: UnitNetMM, At: now.Add(4 * time.Minute)}, now)
	require.NoError(t, err)
	_, err = z.ApplyWater(st, ManualWater{Kind: ManualReset, Depletion: 130, At: now.Add(-72 * time.Hour)}, now)
	require.NoError(t, err)
}

// A reset measured now sets the depletion; one measured earlier is carried
// forward over the hours applied since (FAO-56 eq. 85 with I = 0): each
// later hour adds its ETc and takes away its effective rain, the hour
// containing the measurement counts for its part after it.
func TestApplyWaterResetCarriesForward(t *testing.T) {
	z := maizeZone()
	st := &State{Depletion: 50, EtcSinceRun: 7}
	// Hours 0-3 at Kc 1.2, Ks 1: ETc 0.6, 0.6, 0.6, 1.2; hour 2 rains 10 mm,
	// effective 0.8 (10 - 0.5) = 7.6 (maizeZone rain rule).
	for h, et := range []float64{0.5, 0.5, 0.5, 1.0} {
		rain := 0.0
		if h == 2 {
			rain = 10
		}
		_, _, err := z.StepHour(st, validHour(h, et, rain))
		require.NoError(t, err)
	}
	_, end := hourAt(3)
	sinceRun := st.EtcSinceRun

	// Measured at the end: set as given.
	s, err := z.ApplyWater(st, ManualWater{Kind: ManualReset, Depletion: 40}, end)
	require.NoError(t, err)
	assert.Equal(t, StepReset, s.Kind)
	assert.InDelta(t, 40, s.Depletion, 1e-12)
	assert.Zero(t, s.Irrigation)
	assert.InDelta(t, sinceRun, st.EtcSinceRun, 1e-12, "a measurement is not a watering")

	// Measured at 01:30: half of hour 1 (0.3), hour 2 (0.6 - 7.6), hour 3
	// (1.2): 40 + 0.3 - 7.0 + 1.2 = 34.5.
	at, _ := hourAt(1)
	s, err = z.ApplyWater(st, ManualWater{Kind: ManualReset, Depletion: 40, At: at.Add(30 * time.Minute)}, end)
	require.NoError(t, err)
	assert.InDelta(t, 34.5, s.Depletion, 1e-9)

	// Measured at field capacity before the rain: the rain cannot take the
	// depletion below 0 (the surplus drains, FAO-56 eq. 88): hour 1 0.6,
	// hour 2 max(0, 0.6 + 0.6 - 7.6) = 0, hour 3 1.2.
	s, err = z.ApplyWater(st, ManualWater{Kind: ManualReset, Depletion: 0, At: at}, end)
	require.NoError(t, err)
	assert.InDelta(t, 1.2, s.Depletion, 1e-9)
}
