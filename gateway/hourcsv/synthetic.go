package hourcsv

import (
	"math"
	"strconv"
	"time"
)

// SyntheticYears returns an hourly weather CSV (time, air_temp_c, rh_pct,
// wind_m_s, solar_w_m2, rain_mm) of years consecutive years starting on 1
// January of startYear, for benchmarks and load tests. The weather is made
// up: smooth daily and seasonal cycles for a mid-latitude northern site with
// a little deterministic noise, no sources and no check values.
func SyntheticYears(startYear, years int) []byte {
	start := time.Date(startYear, 1, 1, 0, 0, 0, 0, time.UTC)
	end := start.AddDate(years, 0, 0)
	n := int(end.Sub(start) / time.Hour)
	out := make([]byte, 0, 48*(n+1))
	out = append(out, "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2,rain_mm\n"...)
	noise := uint32(2463534242)
	next := func() float64 { // xorshift32 in 0..1
		noise ^= noise << 13
		noise ^= noise >> 17
		noise ^= noise << 5
		return float64(noise) / math.MaxUint32
	}
	for i := 0; i < n; i++ {
		t := start.Add(time.Duration(i) * time.Hour)
		doy := float64(t.YearDay())
		hour := float64(t.Hour()) + 0.5
		season := -math.Cos(2 * math.Pi * (doy - 15) / 365) // -1 mid-January, +1 mid-July
		daily := math.Sin(math.Pi * (hour - 9) / 12)        // peak mid-afternoon
		temp := 15 + 9*season + (6+2*season)*daily + 2*(next()-0.5)
		rh := math.Min(100, math.Max(8, 62-12*season-22*daily+10*(next()-0.5)))
		wind := math.Max(0, 2.2+1.4*daily+1.5*(next()-0.5))
		dayLen := 12 + 2.8*season
		solar := 0.0
		if x := (hour - (12 - dayLen/2)) / dayLen; x > 0 && x < 1 {
			solar = (620 + 300*season) * math.Sin(math.Pi*x) * (0.55 + 0.45*next())
		}
		rain := 0.0
		if r := next(); r > 0.985 {
			rain = 12 * (r - 0.985) / 0.015
		}
		out = AppendLocal(out, t)
		out = append(out, ',')
		out = strconv.AppendFloat(out, temp, 'f', 1, 64)
		out = append(out, ',')
		out = strconv.AppendFloat(out, rh, 'f', 0, 64)
		out = append(out, ',')
		out = strconv.AppendFloat(out, wind, 'f', 1, 64)
		out = append(out, ',')
		out = strconv.AppendFloat(out, solar, 'f', 0, 64)
		out = append(out, ',')
		out = strconv.AppendFloat(out, rain, 'f', 1, 64)
		out = append(out, '\n')
	}
	return out
}
