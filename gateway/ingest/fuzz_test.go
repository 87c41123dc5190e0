package ingest

import (
	"math"
	"slices"
	"testing"
	"unicode/utf8"
)

// checkRoute asserts the invariants every decoded message keeps, whatever the
// bytes: readings are finite, in range and stamped; every rejection has a
// known reason and an error that says something.
func checkRoute(t *testing.T, r *Router, topic string, payload []byte) {
	rds, rjs := r.Route(topic, payload, arrival)
	for _, rd := range rds {
		v := rd.Sample.Value
		if math.IsNaN(v) || math.IsInf(v, 0) {
			t.Fatalf("non-finite reading %+v", rd)
		}
		if rd.Sample.Time.IsZero() {
			t.Fatalf("reading without time %+v", rd)
		}
		if rd.Site == "" || rd.Station == "" || rd.Sample.Sensor == "" {
			t.Fatalf("reading without site/station/sensor %+v", rd)
		}
		if rd.Counter {
			if v < 0 || (rd.Rollover > 0 && v >= rd.Rollover) {
				t.Fatalf("counter reading out of range %+v", rd)
			}
			continue
		}
		rg := PhysicalRanges[rd.Sample.Quantity]
		if v < rg.Min || v > rg.Max {
			t.Fatalf("reading outside the physical range %+v", rd)
		}
	}
	for _, rj := range rjs {
		if !slices.Contains(Reasons, rj.Reason) {
			t.Fatalf("unknown reason %q", rj.Reason)
		}
		if rj.Err == nil || rj.Err.Error() == "" {
			t.Fatalf("rejection without an error: %+v", rj)
		}
		if !utf8.ValidString(rj.Error()) && utf8.Valid(payload) {
			t.Fatalf("rejection message is not valid UTF-8 for a UTF-8 payload: %q", rj.Error())
		}
	}
}

func fuzzTopic(f *testing.F, name, topic string, corpus ...string) {
	r := newTestRouter(f)
	for _, c := range corpus {
		f.Add([]byte(c))
	}
	f.Fuzz(func(t *testing.T, payload []byte) {
		checkRoute(t, r, topic, payload)
	})
}

func FuzzNumber(f *testing.F) {
	fuzzTopic(f, "number", "bh/west/t", "21.5", " -3e1 ", "NaN", "", "1e400", "0x10", "+.5")
}

func FuzzJSON(f *testing.F) {
	fuzzTopic(f, "json", "bh/west/rh",
		`{"rh": 55, "ts": "2026-06-01T10:00:00Z"}`, `{"rh": "55", "ts": 1780308000123}`,
		`{"rh": null}`, `{"rh": 1e308, "ts": 1e308}`, `[]`, `{"rh": 5, "ts": -1e-300}`)
}

func FuzzFields(f *testing.F) {
	fuzzTopic(f, "fields", "bh/east/obs",
		`{"at": 1780308000000, "temp": 18.25, "dew": 9.5, "wind": 3.1, "sol": 512, "batt": 3.7, "rain_ctr": 17}`,
		`{"temp": null, "wind": "calm", "lux": 1}`, `{"at": "2026-06-01T10:00:00.5+02:00", "rain_ctr": 255.9}`, `{}`)
}

func FuzzSenML(f *testing.F) {
	fuzzTopic(f, "senml", "bh/east/senml",
		`[{"bn":"east:","bt":1780308000,"bu":"Cel","n":"temp","v":18.5},{"n":"vp","u":"hPa","v":12.5,"t":120}]`,
		`[{"bn":"east:","bv":20,"n":"temp","v":-1.5,"t":-30}]`, `[{"n":"east:rain","s":0.2,"bs":1}]`,
		`[{"n":"east:temp","v":1,"x_":1}]`, `[{}]`, `[null]`)
}

// FuzzRoute picks any configured topic (or an unknown one) by index.
func FuzzRoute(f *testing.F) {
	r := newTestRouter(f)
	topics := append(r.Filters(), "bh/unknown")
	f.Add(uint8(0), []byte("20"))
	f.Add(uint8(2), []byte(`{"rh": 40}`))
	f.Add(uint8(7), []byte("99.99"))
	f.Add(uint8(8), []byte(`{"temp": 1, "rain_ctr": 300}`))
	f.Add(uint8(9), []byte(`[{"n":"east:rain","v":2,"u":"in"}]`))
	f.Add(uint8(10), []byte("1"))
	f.Fuzz(func(t *testing.T, which uint8, payload []byte) {
		checkRoute(t, r, topics[int(which)%len(topics)], payload)
	})
}
