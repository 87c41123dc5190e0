package hourly

import (
	"math"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"pgregory.net/rapid"
)

// genStation draws a station between 40 S and 40 N whose clock is on its
// zone meridian (so 11:00-12:00 is near solar noon).
func genStation(t *rapid.T) Station {
	off := rapid.IntRange(-11, 12).Draw(t, "utc_offset")
	return Station{
		Latitude:  rapid.Float64Range(-40, 40).Draw(t, "lat"),
		Longitude: math.Max(-180, math.Min(180, float64(off)*15+rapid.Float64Range(-3, 3).Draw(t, "lon_delta"))),
		Elevation: rapid.Float64Range(0, 2500).Draw(t, "elevation"),
		UTCOffset: float64(off),
		ClearSky:  rapid.SampledFrom([]ClearSky{ClearSkySimple, ClearSkyFull}).Draw(t, "clear_sky"),
	}
}

func genReference(t *rapid.T) Reference {
	return rapid.SampledFrom(References).Draw(t, "reference")
}

// genDate draws a day of 2025 in station standard time.
func genDate(t *rapid.T, st Station) time.Time {
	loc := time.FixedZone("standard", int(st.UTCOffset*3600))
	return time.Date(2025, 1, 1, 0, 0, 0, 0, loc).AddDate(0, 0, rapid.IntRange(0, 364).Draw(t, "day"))
}

// noonHour draws a daytime hour 11:00-12:00 with ordinary weather.
func noonHour(t *rapid.T, st Station) Hour {
	temp := rapid.Float64Range(0, 45).Draw(t, "air_temp")
	rh := rapid.Float64Range(5, 100).Draw(t, "rh")
	ea, err := VapourPressureFromRH(temp, rh)
	if err != nil {
		t.Fatal(err)
	}
	return Hour{
		Start:   genDate(t, st).Add(11 * time.Hour),
		AirTemp: temp,
		Ea:      ea,
		Wind2:   rapid.Float64Range(0, 12).Draw(t, "wind2"),
	}
}

func mustCompute(t *rapid.T, st Station, ref Reference, h Hour, c Carry) Result {
	r, _, err := Compute(st, ref, h, c)
	if err != nil {
		t.Fatalf("compute: %v", err)
	}
	return r
}

// ET rises with Rs. With estimated Rn, dRn/dRs = 0.77 - 1.35 σ T^4
// (0.34 - 0.14 √ea) / Rso, positive whenever Rso exceeds about 1.3 MJ m-2
// h-1 (hottest, driest air), which holds near noon between 40 S and 40 N
// (FAO-56 eq. 38-40, ASCE-EWRI 2005 eq. 44-45; derivation here).
func TestPropertyETRisesWithSolar(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		st := genStation(t)
		ref := genReference(t)
		h := noonHour(t, st)
		sun := SunForPeriod(st, h.Start, time.Hour)
		lo := rapid.Float64Range(0, 1.1).Draw(t, "rs_lo_fraction")
		hi := rapid.Float64Range(lo, 1.1).Draw(t, "rs_hi_fraction")
		a, b := h, h
		a.Solar, b.Solar = lo*sun.Ra, hi*sun.Ra
		ra, rb := mustCompute(t, st, ref, a, Carry{}), mustCompute(t, st, ref, b, Carry{})
		if rb.ET < ra.ET-1e-12 {
			t.Fatalf("ET fell from %v to %v as Rs rose from %v to %v (Rso %v)", ra.ET, rb.ET, a.Solar, b.Solar, ra.Rso)
		}
	})
}

// ET rises with VPD. With the radiation fixed (a measured Rn), only the
// aerodynamic term moves and it is proportional to es - ea: strictly
// non-decreasing for any wind (ASCE-EWRI 2005 eq. 1). With estimated Rn a
// lower ea also raises Rnl (ASCE-EWRI 2005 eq. 44), which can win in calm
// air. Within one day/night regime, dET/d(-ea) > 0 when
// γ Cn/(T+273) u2 > 0.408 Δ (1 - G/Rn) σ T^4 fcd 0.07/√ea; the right side
// is largest at 45 degC (Δ 0.493, σ T^4 2.09 MJ m-2 h-1) with fcd 1 and
// ea 0.5 kPa: 0.0374, against 0.0078 u2 on the left (γ 0.0673, Cn 37), so
// u2 >= 5 m/s suffices over 0-45 degC (derivation here; the property
// checks it).
func TestPropertyETRisesWithVPD(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		st := genStation(t)
		ref := genReference(t)
		h := noonHour(t, st)
		sun := SunForPeriod(st, h.Start, time.Hour)
		h.Solar = rapid.Float64Range(0, 0.8).Draw(t, "rs_fraction") * sun.Ra
		es := SatVapourPressure(h.AirTemp)
		measured := rapid.Bool().Draw(t, "measured_rn")
		lowEa := 0.0
		if measured {
			h.NetRad, h.HasNetRad = rapid.Float64Range(-0.3, 3).Draw(t, "rn"), true
		} else {
			h.Wind2 = rapid.Float64Range(5, 12).Draw(t, "wind2_windy")
			lowEa = 0.5
		}
		if es <= lowEa {
			t.Skip("air too cold for the range")
		}
		eaHi := rapid.Float64Range(lowEa, es).Draw(t, "ea_hi")
		eaLo := rapid.Float64Range(lowEa, eaHi).Draw(t, "ea_lo")
		a, b := h, h
		a.Ea, b.Ea = eaHi, eaLo // b has the larger VPD
		ra, rb := mustCompute(t, st, ref, a, Carry{}), mustCompute(t, st, ref, b, Carry{})
		if ra.Day != rb.Day {
			// Near Rn = 0 the larger Rnl of the drier hour can turn it to
			// night, where ASCE-EWRI 2005 Table 1 switches Cd (0.24 -> 0.96
			// short) and G/Rn (0.1 -> 0.5): a step the equation has by
			// design. The property holds within one regime.
			t.Skip("the two hours straddle the day/night switch")
		}
		if rb.ET < ra.ET-1e-12 {
			t.Fatalf("ET fell from %v to %v as VPD rose from %v to %v", ra.ET, rb.ET, ra.VPD, rb.VPD)
		}
	})
}

// ET rises with wind when VPD is large. dET/du2 has the sign of
// B (Δ + γ) - A γ Cd with A = 0.408 Δ (Rn - G) and B = γ Cn/(T+273) VPD
// (ASCE-EWRI 2005 eq. 1). With Rs <= 0.8 Ra (Rn - G below about
// 2.6 MJ m-2 h-1) this is positive for VPD >= 3.5 kPa for every reference
// and temperature up to 45 degC (derivation here; the property checks it).
func TestPropertyETRisesWithWindWhenDry(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		st := genStation(t)
		ref := genReference(t)
		h := noonHour(t, st)
		h.AirTemp = rapid.Float64Range(28, 45).Draw(t, "hot_air_temp")
		es := SatVapourPressure(h.AirTemp)
		if es < 3.6 {
			t.Skip("cannot reach VPD 3.5 kPa")
		}
		h.Ea = rapid.Float64Range(0, es-3.5).Draw(t, "dry_ea")
		sun := SunForPeriod(st, h.Start, time.Hour)
		h.Solar = rapid.Float64Range(0, 0.8).Draw(t, "rs_fraction") * sun.Ra
		lo := rapid.Float64Range(0, 12).Draw(t, "wind_lo")
		hi := rapid.Float64Range(lo, 12).Draw(t, "wind_hi")
		a, b := h, h
		a.Wind2, b.Wind2 = lo, hi
		ra, rb := mustCompute(t, st, ref, a, Carry{}), mustCompute(t, st, ref, b, Carry{})
		if rb.ET < ra.ET-1e-12 {
			t.Fatalf("ET fell from %v to %v as wind rose from %v to %v (VPD %v)", ra.ET, rb.ET, lo, hi, ra.VPD)
		}
	})
}

// Night hours stay near zero: for the standardized short reference, nights
// with VPD up to 1 kPa and wind up to 3 m/s give -0.06..0.1 mm/h (the
// ASCE-EWRI 2005 night Cd of 0.96 damps the aerodynamic term; bounds:
// common practice, no source). The low end is a calm, clear, bone-dry night
// near 7 degC at altitude: 0.408 Δ 0.5 Rn / (Δ + γ) with Rn = -σ T^4 0.34,
// about -0.05 mm/h (derivation here).
func TestPropertyNightNearZero(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		st := genStation(t)
		temp := rapid.Float64Range(0, 35).Draw(t, "air_temp")
		es := SatVapourPressure(temp)
		h := Hour{
			Start:   genDate(t, st).Add(time.Duration(rapid.SampledFrom([]int{0, 1, 2, 3, 22, 23}).Draw(t, "hour")) * time.Hour),
			AirTemp: temp,
			Ea:      es - rapid.Float64Range(0, math.Min(1, es)).Draw(t, "vpd"),
			Wind2:   rapid.Float64Range(0, 3).Draw(t, "wind2"),
		}
		carry := Carry{Fcd: CloudFactor(rapid.Float64Range(0.3, 1).Draw(t, "carried_rsrso")), Valid: true}
		r := mustCompute(t, st, Short, h, carry)
		if r.Day || r.Ra != 0 {
			t.Fatalf("not a night hour: %+v", r)
		}
		if r.ET < -0.06 || r.ET > 0.1 {
			t.Fatalf("night ET %v mm/h outside -0.06..0.1", r.ET)
		}
	})
}

// The 24 hourly Ra of a standard-time day add up to the daily Ra of FAO-56
// eq. 21 (eq. 28 integrates the same sine over the same day, the clipping at
// ±ωs keeping only the sunlit part). Where sunset falls near standard-time
// midnight (near the polar day, or a station far from its zone meridian)
// the standard-time day and the solar day part a few minutes of sunlight
// belonging to neighbouring dates, so the sums agree to a relative 1e-4,
// not to rounding (seen: 2e-6 at 69 S in mid-January).
func TestPropertyHourlyRaSumsToDaily(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		off := rapid.IntRange(-12, 14).Draw(t, "utc_offset")
		st := Station{
			Latitude:  rapid.Float64Range(-89, 89).Draw(t, "lat"),
			Longitude: rapid.Float64Range(-180, 180).Draw(t, "lon"),
			UTCOffset: float64(off),
		}
		day := genDate(t, st)
		var sum float64
		for h := range 24 {
			sum += SunForPeriod(st, day.Add(time.Duration(h)*time.Hour), time.Hour).Ra
		}
		want := DailyRa(st.Latitude, day.YearDay())
		if math.Abs(sum-want) > 1e-4*math.Max(1, want) {
			t.Fatalf("sum of hourly Ra %v, daily Ra %v", sum, want)
		}
	})
}

// clearDay builds 24 hours of a clear day: Rs = Rso every hour, air
// temperature a cosine between tmin (05:00) and tmax (15:00), constant dew
// point and wind. It returns the hourly ETos sum and the daily ETos of the
// same day's aggregates (Tmax, Tmin, ea, u2, Rs = sum of hourly Rs).
func clearDay(t interface{ Fatalf(string, ...any) }, st Station, ref Reference, day time.Time, tmin, tmax, td, u2 float64) (sum, daily float64) {
	ea := SatVapourPressure(td)
	var rsSum float64
	carry := Carry{}
	for h := range 24 {
		mid := float64(h) + 0.5
		temp := tmin + (tmax-tmin)*(1-math.Cos(math.Pi*math.Min(math.Max(mid-5, 0), 10)/10))/2
		if mid > 15 {
			temp = tmax - (tmax-tmin)*(mid-15)/14
		}
		hour := Hour{Start: day.Add(time.Duration(h) * time.Hour), AirTemp: temp, Ea: math.Min(ea, SatVapourPressure(temp)), Wind2: u2}
		sun := SunForPeriod(st, hour.Start, time.Hour)
		hour.Solar = RsoSimple(sun.Ra, st.Elevation)
		rsSum += hour.Solar
		r, c, err := Compute(st, ref, hour, carry)
		if err != nil {
			t.Fatalf("compute: %v", err)
		}
		carry = c
		sum += r.ET
	}
	dr, err := Daily(st, ref, DayWeather{Date: day, TMax: tmax, TMin: tmin, Humidity: HumidityEa, Ea: ea, Wind2: u2, Solar: rsSum})
	if err != nil {
		t.Fatalf("daily: %v", err)
	}
	return sum, dr.ET
}

// For clear days in the growing season the sum of 24 hourly ETos stays
// close to the daily ETos of the same day. The hourly form was calibrated
// (ASCE-EWRI 2005 Table 1, day/night Cd and G) so that hourly sums match
// daily ETos on average, with differences of a few percent at the test sites
// of that report (from memory). This synthetic day (cosine warming to 15:00,
// linear cooling, constant dew point and wind) makes the hourly sum run
// lower than the daily value as wind and dryness grow, because the daily es
// (FAO-56 eq. 12, mean of e° at Tmax and Tmin) exceeds the time mean of e°
// and the night hours carry Cd 0.96. Tolerances (common practice, no
// source; measured worst cases in brackets): moderate days (u2 1-3 m/s,
// dew point at most 6 degC below Tmin, range 8-15 degC) within 10 %
// [9.0 % in 20000 draws]; the wide range (u2 1-5 m/s, dew depression to
// 12 degC, range to 18 degC) within 17 % [15.8 %].
func TestPropertyHourlySumNearDaily(t *testing.T) {
	for _, c := range []struct {
		name                   string
		maxWind, maxDep, maxRg float64
		tol                    float64
	}{
		{"moderate", 3, 6, 15, 0.10},
		{"wide", 5, 12, 18, 0.17},
	} {
		t.Run(c.name, func(t *testing.T) {
			var worst float64
			rapid.Check(t, func(t *rapid.T) {
				st := genStation(t)
				st.ClearSky = ClearSkySimple
				// Growing season: 120 days around the local summer solstice.
				n := rapid.IntRange(-60, 60).Draw(t, "days_from_solstice")
				loc := time.FixedZone("standard", int(st.UTCOffset*3600))
				solstice := time.Date(2025, 6, 21, 0, 0, 0, 0, loc)
				if st.Latitude < 0 {
					solstice = time.Date(2025, 12, 21, 0, 0, 0, 0, loc)
				}
				day := solstice.AddDate(0, 0, n)
				tmin := rapid.Float64Range(8, 24).Draw(t, "tmin")
				tmax := tmin + rapid.Float64Range(8, c.maxRg).Draw(t, "range")
				td := tmin - rapid.Float64Range(0, c.maxDep).Draw(t, "dew_depression")
				u2 := rapid.Float64Range(1, c.maxWind).Draw(t, "wind2")
				sum, daily := clearDay(t, st, Short, day, tmin, tmax, td, u2)
				diff := (sum - daily) / daily
				worst = math.Max(worst, math.Abs(diff))
				if math.Abs(diff) > c.tol {
					t.Fatalf("hourly sum %.3f vs daily %.3f mm: %+.1f %%", sum, daily, diff*100)
				}
			})
			t.Logf("largest |hourly sum - daily| / daily: %.1f %%", worst*100)
		})
	}
}

// A typical clear summer day at 38.5 N (Tmin 15, Tmax 32, dew point 12 degC,
// u2 2 m/s): the hourly ETos sum is within 5 % of the daily ETos (common
// practice, no source; -4.3 % measured).
func TestHourlySumNearDailyTypicalDay(t *testing.T) {
	st := Station{Latitude: 38.5, Longitude: -120, Elevation: 20, UTCOffset: -8}
	day := time.Date(2025, 7, 1, 0, 0, 0, 0, time.FixedZone("standard", -8*3600))
	sum, daily := clearDay(t, st, Short, day, 15, 32, 12, 2)
	assert.InEpsilon(t, daily, sum, 0.05)
	require.Greater(t, sum, 5.0)
}
