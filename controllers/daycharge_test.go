package controllers

import (
	"testing"
	"time"
)

// ChargedOn counts the zone's commands of the local standard-time day of t
// as the daily cap does (the same chargedMinutes rule) and nothing else.
func TestChargedOn(t *testing.T) {
	loc := time.FixedZone("UTC-8", -8*3600)
	z := &Zone{ID: "row-a", Loc: loc}
	day := time.Date(2026, 7, 1, 0, 0, 0, 0, loc)
	ledger := []Command{
		{Zone: "row-a", Start: day.Add(6 * time.Hour), Minutes: 40, State: Finished},
		{Zone: "row-a", Start: day.Add(20 * time.Hour), Minutes: 30, State: Planned},
		{Zone: "row-a", Start: day.Add(7 * time.Hour), Minutes: 50, State: Failed, RunKnown: true, MinutesRun: 12.2},
		{Zone: "row-a", Start: day.Add(8 * time.Hour), Minutes: 25, State: Cancelled},
		{Zone: "row-a", Start: day.Add(9 * time.Hour), Minutes: 25, State: Expired},               // never sent
		{Zone: "row-a", Start: day.Add(-time.Minute), Minutes: 60, State: Finished},               // the day before, local time
		{Zone: "row-a", Start: day.Add(24 * time.Hour), Minutes: 60, State: Planned},              // the next day
		{Zone: "row-b", Start: day.Add(6 * time.Hour), Minutes: 90, State: Finished},              // another zone
		{Zone: "row-a", Start: day.Add(10 * time.Hour), Minutes: 20, State: Expired, Attempts: 1}, // sent: may have run
	}
	// 40 + 30 + ceil(12.2) + 0 + 0 + 20 = 103
	if got := z.ChargedOn(ledger, day.Add(12*time.Hour)); got != 103 {
		t.Errorf("ChargedOn = %d, want 103", got)
	}
	if got := z.ChargedOn(ledger, day.Add(-time.Hour)); got != 60 {
		t.Errorf("ChargedOn the day before = %d, want 60", got)
	}
}
