package controllers

import (
	"testing"
	"time"
)

// BenchmarkStepHour measures one hourly balance step of one zone with a full
// 72-hour history (the p adjustment scans it).
func BenchmarkStepHour(b *testing.B) {
	z := maizeZone()
	z.Soil.AdjustP = true
	st := &State{Depletion: 40}
	for h := 0; h < KeepHours; h++ {
		if _, _, err := z.StepHour(st, validHour(h, 0.4, 0)); err != nil {
			b.Fatal(err)
		}
	}
	b.ResetTimer()
	for i := 0; b.Loop(); i++ {
		if _, _, err := z.StepHour(st, validHour(KeepHours+i, 0.4, 0)); err != nil {
			b.Fatal(err)
		}
		if st.Depletion > 60 {
			st.Depletion = 40
		}
	}
}

// BenchmarkDecide20Zones measures one decision over 20 zones sharing a
// two-valve source with a ledger of 200 past commands.
func BenchmarkDecide20Zones(b *testing.B) {
	now := at(1, 21, 0)
	var zones []ZoneInput
	var ledger []Command
	for i := 0; i < 20; i++ {
		z := maizeZone()
		z.ID = string(rune('a'+i)) + "-block"
		z.System.MaxMinutes = 60
		zones = append(zones, ZoneInput{z, withWeather(&State{Depletion: 72 + float64(i)}, now)})
		for j := 0; j < 10; j++ {
			ledger = append(ledger, Command{ID: "x", Zone: z.ID, Minutes: 30, Start: now.Add(-time.Duration(j) * 24 * time.Hour), State: Finished})
		}
	}
	src := []Source{{ID: "lowmead-pump", MaxValves: 2}}
	for b.Loop() {
		p := PlanRuns(now, zones, src, ledger, Holds{})
		if len(p.Commands) == 0 {
			b.Fatal("no commands")
		}
	}
}
