package precision

import (
	"math"
	"os"
	"strings"
	"testing"
	"time"
)

func TestRound(t *testing.T) {
	cases := []struct {
		u    Unit
		v    float64
		want float64
	}{
		{MM, 0.21539289829921476, 0.22},
		{Minutes, 37.46, 37.5},
		{Litres, 1234.56, 1234.6},
		{Celsius, 21.4449, 21.44},
		{KPa, 101.32471, 101.325},
		{Fraction, 0.83349, 0.833},
		{MM, -0.001, 0}, // no "-0" in a payload
	}
	for _, c := range cases {
		if got := Round(c.u, c.v); got != c.want || math.Signbit(got) != math.Signbit(c.want) {
			t.Errorf("Round(%s, %v) = %v, want %v", c.u, c.v, got, c.want)
		}
	}
	if p := Ptr(MM, math.NaN()); p != nil {
		t.Errorf("Ptr(NaN) = %v, want nil", *p)
	}
	if p := Ptr(MM, 1.005001); p == nil || *p != 1.01 {
		t.Errorf("Ptr(1.005001) = %v, want 1.01", p)
	}
}

func TestEveryUnitHasDecimals(t *testing.T) {
	seen := map[Unit]bool{}
	for _, r := range table {
		if seen[r.u] {
			t.Errorf("unit %q twice in the table", r.u)
		}
		seen[r.u] = true
		if r.what == "" {
			t.Errorf("unit %q says nothing of what it measures", r.u)
		}
	}
	defer func() {
		if recover() == nil {
			t.Error("Decimals of an unknown unit did not panic")
		}
	}()
	Decimals(Unit("furlong"))
}

func TestDuration(t *testing.T) {
	cases := map[time.Duration]string{
		7903066 * time.Nanosecond:               "7.9ms",
		903066 * time.Nanosecond:                "903µs",
		12345678901 * time.Nanosecond:           "12.3s",
		(90*time.Second + 400*time.Millisecond): "1m30s",
	}
	for d, want := range cases {
		got := Duration(d)
		if got.String() != want {
			t.Errorf("Duration(%v) = %v, want %s", d, got, want)
		}
		if back, err := time.ParseDuration(got.String()); err != nil || back != got {
			t.Errorf("Duration(%v) = %q does not parse back: %v", d, got, err)
		}
	}
	if got := DurationSeconds(7903066 * time.Nanosecond); got != 0.008 {
		t.Errorf("DurationSeconds(7.903066ms) = %v, want 0.008", got)
	}
}

// TestREADMEDocumentsTheTable keeps the README's table of payload
// precision equal to the code's.
func TestREADMEDocumentsTheTable(t *testing.T) {
	b, err := os.ReadFile("../../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(b), Markdown()) {
		t.Errorf("README.md lacks the precision table; paste this:\n%s", Markdown())
	}
}
