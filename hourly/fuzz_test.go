package hourly

import (
	"math"
	"reflect"
	"testing"
	"time"
)

// checkFinite fails when any float64 field of v is NaN or infinite.
func checkFinite(t *testing.T, v any) {
	t.Helper()
	rv := reflect.ValueOf(v)
	for i := range rv.NumField() {
		f := rv.Field(i)
		if f.Kind() == reflect.Float64 && (math.IsNaN(f.Float()) || math.IsInf(f.Float(), 0)) {
			t.Fatalf("%s = %v in a result without error: %+v", rv.Type().Field(i).Name, f.Float(), v)
		}
	}
}

// FuzzCompute feeds arbitrary numbers to Compute: it must never panic, and a
// nil error must come with finite intermediates and a finite carry.
func FuzzCompute(f *testing.F) {
	// Example 19 day and night hours, an arctic summer midnight, edge values.
	f.Add(16.2167, -16.25, 8.0, -1.0, int64(1001944800), int64(3600), 38.0, 3.445, 3.3, 2.45, 0.0, 0.0, false, false, uint8(2), false, 0.0, false)
	f.Add(16.2167, -16.25, 8.0, -1.0, int64(1001898000), int64(3600), 28.0, 3.402, 1.9, 0.0, 0.0, 0.0, false, false, uint8(0), true, 0.73, true)
	f.Add(80.0, 15.0, 0.0, 1.0, int64(1750460400), int64(900), 5.0, 0.8, 6.0, 0.3, 0.5, -0.05, true, true, uint8(1), true, 0.5, true)
	f.Add(-90.0, 180.0, 9000.0, 14.0, int64(-1), int64(60), 65.0, 25.0, 100.0, 5.76, -5.4, 5.4, true, true, uint8(7), false, 2.0, true)
	f.Add(0.0, 0.0, -500.0, -14.0, int64(0), int64(0), -90.0, 0.0, 0.0, -0.036, 0.0, 0.0, false, false, uint8(1), true, math.NaN(), true)
	f.Fuzz(func(t *testing.T, lat, lon, elev, off float64, unix, lengthSec int64, temp, ea, wind, solar, rn, g float64, hasRn, hasG bool, refIdx uint8, full bool, carryFcd float64, carryValid bool) {
		st := Station{Latitude: lat, Longitude: lon, Elevation: elev, UTCOffset: off}
		if full {
			st.ClearSky = ClearSkyFull
		}
		ref := Reference("bogus")
		if int(refIdx) < len(References) {
			ref = References[refIdx]
		}
		h := Hour{
			Start:   time.Unix(unix, 0),
			Length:  time.Duration(lengthSec) * time.Second,
			AirTemp: temp, Ea: ea, Wind2: wind, Solar: solar,
			NetRad: rn, HasNetRad: hasRn, SoilHeat: g, HasSoilHeat: hasG,
		}
		in := Carry{Fcd: carryFcd, Valid: carryValid}
		res, out, err := Compute(st, ref, h, in)
		if err != nil {
			if out != in && !(math.IsNaN(in.Fcd) && math.IsNaN(out.Fcd)) {
				t.Fatalf("carry changed on error %v: %+v -> %+v", err, in, out)
			}
			return
		}
		checkFinite(t, res)
		if math.IsNaN(out.Fcd) || math.IsInf(out.Fcd, 0) {
			t.Fatalf("carry fcd %v", out.Fcd)
		}
		if res.Fcd < 0.05 || res.Fcd > 1 {
			t.Fatalf("fcd %v outside 0.05..1", res.Fcd)
		}
		if res.Ra < 0 || res.Rso < 0 || res.Ea > res.Es || res.VPD < 0 {
			t.Fatalf("impossible intermediates: %+v", res)
		}
	})
}

// FuzzAggregateHour feeds arbitrary samples to AggregateHour: no panic, and
// every Stats and Hour value finite.
func FuzzAggregateHour(f *testing.F) {
	f.Add([]byte{0, 10, 20, 1, 30, 40, 2, 50, 60, 3, 70, 80}, 2.0, 0.5, -1.5)
	f.Add([]byte{5, 0, 0, 5, 0, 0, 6, 255, 255}, 10.0, 1.0, 1e300)
	f.Fuzz(func(t *testing.T, raw []byte, height, coverage, scale float64) {
		var samples []Sample
		for i := 0; i+2 < len(raw) && len(samples) < 500; i += 3 {
			q := Quantities[int(raw[i])%len(Quantities)]
			samples = append(samples, Sample{
				Sensor:   string('a' + rune(raw[i]%3)),
				Quantity: q,
				Time:     hourStart.Add(time.Duration(int(raw[i+1])-20) * 30 * time.Second),
				Value:    float64(int(raw[i+2])-60) * scale,
			})
		}
		a, err := AggregateHour(hourStart, samples, AggregateOptions{WindHeight: height, MinCoverage: coverage})
		if err != nil {
			return
		}
		checkFinite(t, a.Hour)
		for q, st := range a.Stats {
			checkFinite(t, st)
			if st.Coverage <= 0 || st.Coverage > 1 {
				t.Fatalf("%s coverage %v", q, st.Coverage)
			}
		}
		if math.IsNaN(a.Rain) || math.IsInf(a.Rain, 0) {
			t.Fatalf("rain %v", a.Rain)
		}
		if a.Complete() {
			if _, _, err := Compute(Station{Latitude: 45}, Short, a.Hour, Carry{}); err != nil && a.Hour.Ea <= SatVapourPressure(a.Hour.AirTemp)*(1+EaTolerance) {
				t.Fatalf("complete aggregate rejected by Compute: %v (%+v)", err, a.Hour)
			}
		}
	})
}
