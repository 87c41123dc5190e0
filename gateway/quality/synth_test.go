package quality

import (
	"math"
	"math/rand/v2"
	"time"

	"etpulse/gateway/config"
	"etpulse/hourly"
)

// The synthetic streams below are invented test weather for an invented
// orchard station ("Brackenfold", 37.2 N, 120.4 W, 60 m, UTC-8) in early
// summer. Radiation follows the clear-sky envelope of the hourly engine
// (hourly.SunForPeriod, FAO-56 eq. 28; hourly.RsoSimple, FAO-56 eq. 37)
// times a clearness that the test chooses; they are test inputs, not check
// values.
var brackenfold = hourly.Station{Latitude: 37.2, Longitude: -120.4, Elevation: 60, UTCOffset: -8}

// synthStart is local midnight of 1 June 2026 (UTC-8).
var synthStart = time.Date(2026, 6, 1, 8, 0, 0, 0, time.UTC)

// weather describes one synthetic stream.
type weather struct {
	st         hourly.Station
	clearness  func(day, hour int) float64 // Rs/Rso the sky allows (0-1); nil: clear
	solarScale float64                     // multiplier of the pyranometer (soiling < 1, wrong unit >> 1); 0 means 1
	nightSolar float64                     // W m-2 added in dark hours (sensor offset)
	tMean      float64                     // daily mean air temperature, °C
	tAmp       float64                     // half the diurnal range, °C
	tOffset    float64                     // added to air temperature (a biased station)
	rhCap      float64                     // largest RH the sensor reports (drift); 0: no cap
	nightRHMax float64                     // RH the nights reach (100 humid, ~40 arid)
	dayRHMin   float64                     // RH of the afternoon
	windDay    float64                     // afternoon wind, m/s
	windNight  float64                     // night wind, m/s (0: calm nights)
	windStuck  *float64                    // wind sensor stuck at this value
	tempStuck  *float64                    // air temperature stuck at this value from hour stuckFrom on
	stuckFrom  int
}

func (w weather) defaults() weather {
	if w.st == (hourly.Station{}) {
		w.st = brackenfold
	}
	if w.solarScale == 0 {
		w.solarScale = 1
	}
	if w.tMean == 0 && w.tAmp == 0 {
		w.tMean, w.tAmp = 21, 8
	}
	if w.nightRHMax == 0 {
		w.nightRHMax = 99
	}
	if w.dayRHMin == 0 {
		w.dayRHMin = 45
	}
	if w.windDay == 0 {
		w.windDay = 3.5
	}
	return w
}

// hours generates n hours of observations, as the monitor would keep them.
func (w weather) hours(n int) []HourObs {
	w = w.defaults()
	out := make([]HourObs, 0, n)
	off := time.Duration(w.st.UTCOffset * float64(time.Hour))
	for i := range n {
		start := synthStart.Add(time.Duration(i) * time.Hour)
		local := start.Add(off)
		day, hour := i/24, local.Hour()
		sp := hourly.SunForPeriod(w.st, start, time.Hour)
		rso := hourly.RsoSimple(sp.Ra, w.st.Elevation)
		k := 0.98
		if w.clearness != nil {
			k = w.clearness(day, hour)
		}
		solarW := rso * k * w.solarScale / 0.0036
		if sp.Elevation < -0.1 {
			solarW += w.nightSolar
		}
		// Diurnal temperature: minimum near sunrise, maximum mid-afternoon.
		phase := 2 * math.Pi * (float64(hour) - 15) / 24
		t := w.tMean + w.tAmp*math.Cos(phase) + w.tOffset
		if w.tempStuck != nil && i >= w.stuckFrom {
			t = *w.tempStuck
		}
		// RH falls with temperature between the night maximum and the afternoon minimum.
		frac := (math.Cos(phase) + 1) / 2
		rh := w.nightRHMax - (w.nightRHMax-w.dayRHMin)*frac
		if w.rhCap > 0 {
			rh = math.Min(rh, w.rhCap)
		}
		ea := rh / 100 * hourly.SatVapourPressure(t-w.tOffset)
		wind := w.windNight + (w.windDay-w.windNight)*math.Max(0, math.Sin(math.Pi*(float64(hour)-6)/14))
		if w.windStuck != nil {
			wind = *w.windStuck
		}
		spread := 0.4
		if w.tempStuck != nil && i >= w.stuckFrom {
			spread = 0
		}
		windSpread := 0.8
		if w.windStuck != nil || wind == 0 {
			windSpread = 0
		}
		o := HourObs{
			Start: start, Local: local, HasSun: true, SunElevation: sp.Elevation, Ra: sp.Ra, Rso: rso, Ea: ea,
			Q: map[hourly.Quantity]QStats{
				hourly.AirTemp:     {N: 60, Min: t - spread, Max: t + spread, Mean: t},
				hourly.RelHumidity: {N: 60, Min: rh - 1, Max: math.Min(rh+1, math.Max(rh, w.rhCapOr100())), Mean: rh},
				hourly.Wind:        {N: 60, Min: math.Max(0, wind-windSpread), Max: wind + windSpread, Mean: wind},
				hourly.Solar:       {N: 60, Min: solarW * 0.9, Max: solarW * 1.1, Mean: solarW},
			},
		}
		out = append(out, o)
	}
	return out
}

func (w weather) rhCapOr100() float64 {
	if w.rhCap > 0 {
		return w.rhCap
	}
	return 100
}

// cloudyWeek is a normal cloudy week: broken cloud that changes hour by hour,
// one overcast day, no clear day.
func cloudyWeek(seed uint64) func(day, hour int) float64 {
	r := rand.New(rand.NewPCG(seed, 7))
	cache := map[[2]int]float64{}
	return func(day, hour int) float64 {
		k := [2]int{day, hour}
		if v, ok := cache[k]; ok {
			return v
		}
		v := 0.35 + 0.5*r.Float64()
		if day == 3 {
			v = 0.3
		}
		cache[k] = v
		return v
	}
}

func testAlerts() *config.Alerts {
	a := &config.Alerts{}
	a.ApplyDefaults()
	return a
}

func ptr[T any](v T) *T { return &v }
