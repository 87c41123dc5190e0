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
	f := newFixture(b, testConfig(config.RespondKeep), filepath.Join(b.TempDir(), "o.db"), t0)
	qs := []hourly.Quantity{hourly.AirTemp, hourly.RelHumidity, hourly.Wind, hourly.Solar}
	ids := []string{"t1", "h1", "u1", "p1"}
	for i := 0; b.Loop(); i++ {
		at := t0.Add(time.Duration(i/4) * time.Second)
		k := i % 4
		f.mon.ObserveSample("brackenfold", "orchard", hourly.Sample{Sensor: ids[k], Quantity: qs[k], Time: at, Value: 20 + float64(i%7)*0.1}, at)
	}
}
