package zones

import (
	"math"
	"testing"
)

// FuzzDecodeReport: any bytes from the network give a valid report or an
// error, never a panic, and a valid report has sane figures.
func FuzzDecodeReport(f *testing.F) {
	for _, s := range []string{
		`{"id":"row-a-20260701T1802Z-c1","state":"finished","minutes_run":240,"volume_l":3240}`,
		`{"id":"x","state":"accepted"}`,
		`{"id":"x","state":"failed","minutes_run":3.5,"reason":"pressure low"}`,
		`{"id":"x","state":"finished","minutes_run":-1}`,
		`{"id":"x","state":"finished"} {}`,
		`[]`, ``, `{"id":"x","state":"finished","minutes_run":1e309}`,
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		r, err := DecodeReport(b)
		if err != nil {
			return
		}
		if r.ID == "" || math.IsNaN(r.MinutesRun) || r.MinutesRun < 0 || r.MinutesRun > 1440 || r.VolumeL < 0 || math.IsInf(r.VolumeL, 0) {
			t.Fatalf("accepted a bad report %+v from %q", r, b)
		}
	})
}

// FuzzDecodeHoldRequest: likewise for hold requests.
func FuzzDecodeHoldRequest(f *testing.F) {
	for _, s := range []string{
		`{"id":"r1","zone":"row-a","action":"rain_delay","hours":24}`,
		`{"id":"r2","action":"hold"}`,
		`{"id":"r3","action":"release","zone":"row-b"}`,
		`{"action":"rain_delay","hours":0}`,
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		h, err := DecodeHoldRequest(b)
		if err != nil {
			return
		}
		if h.Action == "rain_delay" && !(h.Hours >= 1 && h.Hours <= 240) {
			t.Fatalf("accepted rain delay of %v h", h.Hours)
		}
		if h.Action == "hold" && !(h.Hours >= 0 && h.Hours <= 8760) {
			t.Fatalf("accepted hold of %v h", h.Hours)
		}
	})
}
