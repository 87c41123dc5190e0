package hourly

import (
	"math"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestDatelineSolarTime: a station whose zone meridian lies across the date
// line from it (Lz - Lm beyond ±180°) gets the solar time of the wrapped
// longitude difference.
func TestDatelineSolarTime(t *testing.T) {
	// Hand derivation (FAO-56 eq. 31-33). Station 171.8° W, standard time
	// UTC+13, whose zone meridian is 195° E = 165° W, so Lz - Lm =
	// 165 - 171.8 = -6.8° (degrees west). Hour 11:00-12:00 standard time on
	// 22 March 2025, J = 81: b = 2π(81 - 81)/364 = 0 (eq. 33), Sc = 0.1645
	// sin 0 - 0.1255 cos 0 - 0.025 sin 0 = -0.1255 h (eq. 32). Mid-point
	// t = 11.5 h:
	//   ω = π/12 [(11.5 + 0.06667 x (-6.8) - 0.1255) - 12]
	//     = π/12 x (-1.078856) = -0.2824439 rad (eq. 31).
	// Without the wrap, Lz - Lm = -366.8° gives 0.06667 x 360 = 24.0012 h
	// instead of 24 h: ω off by 0.0012 h (4.3 s), 3.1e-4 rad.
	st := Station{Latitude: -14.3, Longitude: -171.8, UTCOffset: 13}
	start := time.Date(2025, 3, 21, 22, 0, 0, 0, time.UTC) // 11:00 on 22 March at UTC+13
	sp := SunForPeriod(st, start, time.Hour)
	require.Equal(t, 81, sp.DayOfYear)
	assert.InDelta(t, -0.1255, sp.Sc, 1e-9, "FAO-56 eq. 32 at J = 81")
	assert.InDelta(t, -0.2824439, sp.Omega, 1e-6, "hand-derived, FAO-56 eq. 31")

}

// TestHargreavesFillCappedAtRso: an estimated Rs above the clear-sky
// radiation is limited to Rso and the result says so; a measured Rs is not.
func TestHargreavesFillCappedAtRso(t *testing.T) {
	h := ex19Day()
	sun := SunForPeriod(ex19, h.Start, time.Hour)
	rso := RsoSimple(sun.Ra, ex19.Elevation) // FAO-56 eq. 37
	// FAO-56 eq. 50 with a 25 °C range: kRs √ΔT = 0.16 x 5 = 0.8 > 0.75, so
	// the estimate exceeds Rso by 0.8/(0.75 + 2e-5 x 8) = 1.066 (hand-derived).
	est := HargreavesSolar(sun.Ra, 40, 15, 0.16)
	require.InDelta(t, 1.066, est/rso, 0.001)

	h.Solar, h.SolarEstimated = est, true
	res, _, err := Compute(ex19, Short, h, Carry{})
	require.NoError(t, err)
	assert.True(t, res.SolarCapped)
	assert.InDelta(t, rso, res.Rs, 1e-12)
	assert.InDelta(t, NetShortwave(rso), res.Rns, 1e-12)
	assert.Equal(t, 1.0, res.RsRso)

	h.SolarEstimated = false // a measurement is kept as measured (Rs/Rso is limited only inside fcd)
	res, _, err = Compute(ex19, Short, h, Carry{})
	require.NoError(t, err)
	assert.False(t, res.SolarCapped)
	assert.InDelta(t, est, res.Rs, 1e-12)

	h.Solar = 0.5 * rso // an estimate below Rso is used as it is
	h.SolarEstimated = true
	res, _, err = Compute(ex19, Short, h, Carry{})
	require.NoError(t, err)
	assert.False(t, res.SolarCapped)
	assert.InDelta(t, 0.5*rso, res.Rs, 1e-12)
}

// TestMinWind: u2 below the station's limit is raised to it and flagged.
func TestMinWind(t *testing.T) {
	st := ex19
	st.MinWind2 = DefaultMinWind2
	h := ex19Night()
	h.Wind2 = 0.1
	res, _, err := Compute(st, FAO56, h, Carry{})
	require.NoError(t, err)
	assert.True(t, res.WindFloored)
	assert.Equal(t, 0.5, res.Wind2)
	want := h
	want.Wind2 = 0.5
	ref, _, err := Compute(ex19, FAO56, want, Carry{})
	require.NoError(t, err)
	assert.InDelta(t, ref.ET, res.ET, 1e-15, "the equation with u2 = 0.5 m/s")

	h.Wind2 = 1.9 // above the limit: unchanged
	res, _, err = Compute(st, FAO56, h, Carry{})
	require.NoError(t, err)
	assert.False(t, res.WindFloored)
	assert.Equal(t, 1.9, res.Wind2)

	st.MinWind2 = -1
	require.ErrorIs(t, st.Validate(), ErrConfig)
}

// TestGreenhouseResistance: with a fixed aerodynamic resistance the
// equation uses the wind speed that gives that resistance over the grass
// reference, ra = 208/u2 (FAO-56 eq. 4), whatever the measured wind.
func TestGreenhouseResistance(t *testing.T) {
	st := ex19
	st.AeroResistance = GreenhouseResistance
	st.MinWind2 = DefaultMinWind2
	h := ex19Day()
	h.Wind2 = 0.05
	res, _, err := Compute(st, FAO56, h, Carry{})
	require.NoError(t, err)
	assert.InDelta(t, 208/295.0, res.Wind2, 1e-12, "FAO-56 eq. 4: u2 = 208/ra")
	assert.False(t, res.WindFloored)

	// Hand check of the aerodynamic term with ra = 295 s/m against the
	// general form (FAO-56 eq. 3 reduced as in eq. 6/53): γ 37/(T+273) u2
	// VPD / (Δ + γ(1 + 0.34 u2)) with u2 = 0.7051 m/s.
	u := 208 / 295.0
	den := res.Delta + res.Gamma*(1+0.34*u)
	assert.InDelta(t, res.Gamma*37/(38+273)*u*res.VPD/den, res.AerodynamicTerm, 1e-12)

	h.Wind2 = 6 // the outside wind does not matter inside
	res2, _, err := Compute(st, FAO56, h, Carry{})
	require.NoError(t, err)
	assert.Equal(t, res.ET, res2.ET)

	st.AeroResistance = -3
	require.ErrorIs(t, st.Validate(), ErrConfig)
}

// runHours computes the hours [from, to) of the Example 19 station in
// sequence with constant weather, starting from carry, and returns the
// result of the last hour and the carry after it.
func runHours(t *testing.T, st Station, from, to time.Time, carry Carry) (Result, Carry) {
	t.Helper()
	var res Result
	for h := from; h.Before(to); h = h.Add(time.Hour) {
		sun := SunForPeriod(st, h, time.Hour)
		hour := ex19Night()
		hour.Start = h
		hour.Solar = 0.7 * RsoSimple(sun.Ra, st.Elevation)
		var err error
		res, carry, err = Compute(st, Short, hour, carry)
		require.NoError(t, err)
	}
	return res, carry
}

// TestCarryAcrossOutage: the night cloudiness value is carried through the night
// from the last hour with the sun above 0.3 rad, and not across a missed
// day nor beyond MaxCarryAge.
func TestCarryAcrossOutage(t *testing.T) {
	day := time.Date(2001, 9, 30, 6, 0, 0, 0, ex19Zone)

	// Continuous data: the night hours carry the day's value.
	_, carry := runHours(t, ex19, day, day.Add(18*time.Hour), Carry{}) // to 00:00 on 1 October
	require.True(t, carry.Valid)
	night := ex19Night() // 02:00 on 1 October
	res, _, err := Compute(ex19, Short, night, carry)
	require.NoError(t, err)
	assert.Equal(t, FcdCarried, res.FcdSource)
	assert.False(t, res.CarryExpired)

	// A 28-hour outage: the last carry is from 30 September, the next hour
	// computed is 02:00 on 2 October. The day of 1 October was missed.
	later := night
	later.Start = night.Start.Add(24 * time.Hour)
	res, out, err := Compute(ex19, Short, later, carry)
	require.NoError(t, err)
	assert.Equal(t, FcdDefault, res.FcdSource, "a carry from two days earlier is not used")
	assert.True(t, res.CarryExpired)
	assert.InDelta(t, CloudFactor(DefaultNightRsRso), res.Fcd, 1e-12)
	assert.Equal(t, Carry{}, out)

	// A short night gap (no sunny hour missed) keeps the carry.
	assert.True(t, CarryUsable(ex19, carry, night.Start.Add(2*time.Hour)))
	// A gap that swallowed the afternoon's last sunny hour does not.
	noon := Carry{Fcd: 0.7, From: time.Date(2001, 10, 1, 12, 0, 0, 0, ex19Zone), Valid: true}
	assert.False(t, CarryUsable(ex19, noon, time.Date(2001, 10, 1, 20, 0, 0, 0, ex19Zone)))
	assert.False(t, CarryUsable(ex19, Carry{Fcd: 0.7, From: night.Start.Add(time.Hour), Valid: true}, night.Start), "a carry from the future")

	// Polar night: no sunny hour for days; the carry ends after MaxCarryAge.
	arctic := Station{Latitude: 69.6, Longitude: 18.9, UTCOffset: 1}
	last := time.Date(2025, 11, 10, 11, 0, 0, 0, time.UTC)
	c := Carry{Fcd: 0.5, From: last, Valid: true}
	assert.True(t, CarryUsable(arctic, c, last.Add(MaxCarryAge)))
	assert.False(t, CarryUsable(arctic, c, last.Add(MaxCarryAge+time.Hour)))
	assert.False(t, math.IsNaN(c.Fcd))
}
