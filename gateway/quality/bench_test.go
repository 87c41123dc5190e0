package quality

import (
	"path/filepath"
	"testing"
	"time"

	"go.etcd.io/bbolt"

	"etpulse/gateway/config"
	"etpulse/hourly"
)

// BenchmarkHandleHour measures closing one station-hour with a full window
// of days kept (every hour-level check runs), inside its own transaction.
func BenchmarkHandleHour(b *testing.B) {
	f := newFixture(b, testConfig(config.RespondKeep), filepath.Join(b.TempDir(), "b.db"), synthStart)
	f.cfg.Alerts.Stations[0].HumidityDrift = true
	f.db.NoSync = true // measure the checks, not the disk
	hours := weather{clearness: cloudyWeek(1)}.hours((config.MaxAlertWindowDays + 2) * 24)
	for _, o := range hours[:len(hours)-24] {
		if err := f.db.Update(func(tx *bbolt.Tx) error { return f.mon.HandleHour(tx, record(o)) }); err != nil {
			b.Fatal(err)
		}
	}
	tail := hours[len(hours)-24:]
	b.ResetTimer()
	for i := 0; b.Loop(); i++ {
		rec := record(tail[i%len(tail)])
		rec.Revision = i
		if err := f.db.Update(func(tx *bbolt.Tx) error { return f.mon.HandleHour(tx, rec) }); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkObserveSample measures the reading-level checks of one sample.
func BenchmarkObserveSample(b *testing.B) {
	observe, _ := plausibleReadings(b, time.Second)
	for b.Loop() {
		observe()
	}
}

// plausibleReadings returns a function that gives the monitor of a new
// fixture the next plausible reading of its four sensors in turn, a round
// every step.
func plausibleReadings(t testing.TB, step time.Duration) (observe func(), mon *Monitor) {
	f := newFixture(t, testConfig(config.RespondKeep), filepath.Join(t.TempDir(), "o.db"), t0)
	qs := []hourly.Quantity{hourly.AirTemp, hourly.RelHumidity, hourly.Wind, hourly.Solar}
	ids := []string{"t1", "h1", "u1", "p1"}
	i := 0
	return func() {
		at := t0.Add(time.Duration(i/4) * step)
		k := i % 4
		f.mon.ObserveSample("brackenfold", "orchard", hourly.Sample{Sensor: ids[k], Quantity: qs[k], Time: at, Value: 20 + float64(i%7)*0.1}, at)
		i++
	}, f.mon
}
