package hourly

import (
	"testing"
	"time"
)

var sinkResult Result

// reportCPU adds the process CPU time per op since cpu0 as "cpu-ns/op".
func reportCPU(b *testing.B, cpu0 time.Duration) {
	if cpu := processCPU() - cpu0; cpu > 0 && b.N > 0 {
		b.ReportMetric(float64(cpu.Nanoseconds())/float64(b.N), "cpu-ns/op")
	}
}

// BenchmarkHourlyET computes one hour with every intermediate (FAO-56
// Example 19 daytime hour, standardized short reference). Target: <= 300
// ns/op and 0 allocs/op.
func BenchmarkHourlyET(b *testing.B) {
	for _, c := range []struct {
		name string
		sky  ClearSky
	}{{"simple", ClearSkySimple}, {"full", ClearSkyFull}} {
		b.Run(c.name, func(b *testing.B) {
			// Prepared: the station's pressure is computed once, as every
			// caller that computes many hours does.
			st := ex19
			st.ClearSky = c.sky
			st = st.Prepared()
			h := ex19Day()
			var carry Carry
			b.ReportAllocs()
			cpu0 := processCPU()
			for b.Loop() {
				r, next, err := Compute(st, Short, h, carry)
				if err != nil {
					b.Fatal(err)
				}
				sinkResult, carry = r, next
			}
			reportCPU(b, cpu0)
		})
	}
}

// BenchmarkAggregateHour bins one station-hour of samples: five quantities
// every 5 minutes (60 samples) and every minute (300 samples).
func BenchmarkAggregateHour(b *testing.B) {
	for _, step := range []int{5, 1} {
		var s []Sample
		s = append(s, minuteSamples("t1", AirTemp, step, 60, func(m int) float64 { return 20 + float64(m)/10 })...)
		s = append(s, minuteSamples("h1", RelHumidity, step, 60, func(m int) float64 { return 70 - float64(m)/5 })...)
		s = append(s, minuteSamples("a1", Wind, step, 60, func(int) float64 { return 3 })...)
		s = append(s, minuteSamples("p1", Solar, step, 60, func(int) float64 { return 600 })...)
		s = append(s, minuteSamples("r1", Rain, step, 60, func(int) float64 { return 0 })...)
		b.Run(time.Duration(step*int(time.Minute)).String(), func(b *testing.B) {
			b.ReportAllocs()
			cpu0 := processCPU()
			for b.Loop() {
				a, err := AggregateHour(hourStart, s, AggregateOptions{WindHeight: 3, MinCoverage: 0.75})
				if err != nil || !a.Complete() {
					b.Fatal(err, a.Missing)
				}
			}
			reportCPU(b, cpu0)
			b.ReportMetric(float64(len(s)), "samples/op")
		})
	}
}

// BenchmarkDaily computes one day (FAO-56 Example 18 inputs).
func BenchmarkDaily(b *testing.B) {
	st := Station{Latitude: 50.8, Elevation: 100}
	d := DayWeather{Date: time.Date(2001, 7, 6, 0, 0, 0, 0, time.UTC), TMax: 21.5, TMin: 12.3, Humidity: HumidityRHMaxMin, RHMax: 84, RHMin: 63, Wind2: 2.078, Solar: 22.07}
	b.ReportAllocs()
	cpu0 := processCPU()
	for b.Loop() {
		if _, err := Daily(st, FAO56, d); err != nil {
			b.Fatal(err)
		}
	}
	reportCPU(b, cpu0)
}
