package zones

import (
	"math"
	"strings"
	"testing"
	"time"
)

// FuzzDecodeWaterRequest: any bytes from the network give a valid water
// request or an error, never a panic; an accepted request names its zone,
// who and why, has exactly the amount its kind needs, finite, and a time
// that parses.
func FuzzDecodeWaterRequest(f *testing.F) {
	for _, s := range []string{
		`{"id":"w1","zone":"row-a","kind":"applied","minutes":60,"who":"Ana","why":"hand run"}`,
		`{"id":"w2","zone":"row-b","kind":"frost_protection","volume_l":10000,"who":"crew","why":"frost","time":"2026-07-01T05:00:00-08:00"}`,
		`{"id":"w3","zone":"row-c","kind":"depletion_reset","depletion_mm":12,"who":"Ben","why":"probe"}`,
		`{"zone":"row-a","kind":"applied","mm":3,"minutes":4,"who":"a","why":"b"}`,
		`{"zone":"row-a","kind":"applied","mm":1e309,"who":"a","why":"b"}`,
		`{"zone":"row-a","kind":"applied","mm":3,"who":"a\n","why":"b"}`,
		`{"zone":"row-a","kind":"depletion_reset","depletion_mm":3,"who":"a","why":"b","time":"yesterday"}`,
		`[]`, ``, `{"zone":"row-a"} {}`,
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		r, err := DecodeWaterRequest(b)
		if err != nil {
			return
		}
		if r.Zone == "" || strings.TrimSpace(r.Who) == "" || strings.TrimSpace(r.Why) == "" || len(r.Who) > maxWho || len(r.Why) > maxWhy {
			t.Fatalf("accepted a request without zone, who or why: %+v from %q", r, b)
		}
		n := 0
		for _, p := range []*float64{r.MM, r.Minutes, r.VolumeL, r.DepletionMM} {
			if p != nil {
				n++
				if math.IsNaN(*p) || math.IsInf(*p, 0) {
					t.Fatalf("accepted a non-finite amount from %q", b)
				}
			}
		}
		if n != 1 {
			t.Fatalf("accepted %d amounts from %q", n, b)
		}
		if r.Time != "" {
			if _, err := time.Parse(time.RFC3339, r.Time); err != nil {
				t.Fatalf("accepted time %q", r.Time)
			}
		}
		w := r.Manual()
		if (w.Unit == "") != (r.DepletionMM != nil) {
			t.Fatalf("manual form %+v does not match %q", w, b)
		}
	})
}
