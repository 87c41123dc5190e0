package ingest

import (
	"math"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/hourly"
)

// testConfig is an invented farm ("Brackenholm") exercising every format.
const testConfig = `
broker: {max_payload_bytes: 2048}
sites:
  - id: brackenholm
    stations:
      - id: west
        latitude: 52.1
        longitude: -1.2
        elevation_m: 90
        utc_offset_hours: 0
        sensors:
          - {id: t, topic: bh/west/t, format: number, quantity: air_temp, unit: degC}
          - {id: tf, topic: bh/west/tf, format: number, quantity: air_temp, unit: degF}
          - {id: rh, topic: bh/west/rh, format: json, quantity: rel_humidity, unit: "%", value_key: rh, time_key: ts}
          - {id: u, topic: bh/west/u, format: json, quantity: wind, unit: km/h}
          - {id: rs, topic: bh/west/rs, format: number, quantity: solar, unit: W/m2}
          - {id: tips, topic: bh/west/tips, format: number, quantity: rain, rain_mode: tips, mm_per_tip: 0.2}
          - {id: inc, topic: bh/west/inc, format: number, quantity: rain, unit: in}
          - {id: ctr, topic: bh/west/ctr, format: number, quantity: rain, unit: in, rain_mode: counter, rollover_at: 100}
      - id: east
        latitude: 52.1
        longitude: -1.1
        elevation_m: 95
        utc_offset_hours: 0
        sensors:
          - id: obs
            topic: bh/east/obs
            format: fields
            time_key: at
            fields:
              temp: {quantity: air_temp, unit: degC}
              dew: {quantity: dew_point, unit: degC}
              wind: {quantity: wind, unit: m/s}
              sol: {quantity: solar, unit: W/m2}
              rain_ctr: {quantity: rain, rain_mode: counter, mm_per_tip: 0.5, rollover_at: 256}
            ignore: [batt]
          - id: pack
            topic: bh/east/senml
            format: senml
            records:
              "east:temp": {quantity: air_temp, unit: degC}
              "east:vp": {quantity: vapour_pressure, unit: kPa}
              "east:rn": {quantity: net_rad, unit: W/m2}
              "east:rain": {quantity: rain, unit: mm}
            ignore: ["east:batt"]
`

var arrival = time.Date(2026, 6, 1, 10, 30, 0, 0, time.UTC)

func newTestRouter(t testing.TB) *Router {
	t.Helper()
	cfg, err := config.Parse([]byte(testConfig))
	require.NoError(t, err)
	r, err := NewRouter(cfg)
	require.NoError(t, err)
	return r
}

type result struct {
	rds []Reading
	rjs []Rejection
}

func route(t *testing.T, r *Router, topic, payload string) result {
	t.Helper()
	rds, rjs := r.Route(topic, []byte(payload), arrival)
	return result{rds, rjs}
}

// one asserts a single reading and no rejection.
func one(t *testing.T, res result) Reading {
	t.Helper()
	rds, rjs := res.rds, res.rjs
	require.Empty(t, rjs)
	require.Len(t, rds, 1)
	return rds[0]
}

// rejected asserts a single rejection with reason and the exact message.
func rejected(t *testing.T, res result, reason Reason, msg string) {
	t.Helper()
	rds, rjs := res.rds, res.rjs
	require.Empty(t, rds)
	require.Len(t, rjs, 1)
	assert.Equal(t, reason, rjs[0].Reason)
	assert.EqualError(t, rjs[0].Err, msg)
}

func TestFilters(t *testing.T) {
	r := newTestRouter(t)
	assert.Equal(t, []string{"bh/west/t", "bh/west/tf", "bh/west/rh", "bh/west/u", "bh/west/rs", "bh/west/tips",
		"bh/west/inc", "bh/west/ctr", "bh/east/obs", "bh/east/senml"}, r.Filters())
}

func TestNumber(t *testing.T) {
	r := newTestRouter(t)
	rd := one(t, route(t, r, "bh/west/t", " 21.5\n"))
	assert.Equal(t, Reading{Site: "brackenholm", Station: "west", ArrivalStamped: true,
		Sample: hourly.Sample{Sensor: "t", Quantity: hourly.AirTemp, Time: arrival, Value: 21.5}}, rd)

	// 70.7 degF = (70.7 - 32) x 5/9 = 21.5 degC (definition of the scale).
	rd = one(t, route(t, r, "bh/west/tf", "70.7"))
	assert.InDelta(t, 21.5, rd.Sample.Value, 1e-12)

	rejected(t, route(t, r, "bh/west/t", "warm"), ReasonUnparseable, `payload: "warm" is not a decimal number`)
	rejected(t, route(t, r, "bh/west/t", "NaN"), ReasonUnparseable, `payload: "NaN" is not a decimal number`)
	rejected(t, route(t, r, "bh/west/t", "1e999"), ReasonUnparseable, `payload: "1e999" is not a decimal number`)
	rejected(t, route(t, r, "bh/west/t", "0x1p4"), ReasonUnparseable, `payload: "0x1p4" is not a decimal number`)
	rejected(t, route(t, r, "bh/west/t", ""), ReasonUnparseable, `payload: empty, want a number`)

	// A structured payload on a number sensor names the format that fits.
	rejected(t, route(t, r, "bh/west/t", `{"value":21.4}`), ReasonUnparseable,
		`payload: {"value":21.4} is a JSON object, but sensor "t" has format number (a bare number such as 21.4): set format: json and value_key: value`)
	rejected(t, route(t, r, "bh/west/t", ` {"temp": 21.4, "time": 1780308000}`), ReasonUnparseable,
		`payload: {"temp": 21.4, "time": 1780308000} is a JSON object, but sensor "t" has format number (a bare number such as 21.4): set format: json and value_key: temp`)
	rejected(t, route(t, r, "bh/west/t", `{"temp": 21.4, "rh": 60}`), ReasonUnparseable,
		`payload: {"temp": 21.4, "rh": 60} is a JSON object, but sensor "t" has format number (a bare number such as 21.4): set format: json and value_key: rh (or format: fields for several values)`)
	rejected(t, route(t, r, "bh/west/t", `[{"n":"t","v":21.4}]`), ReasonUnparseable,
		`payload: [{"n":"t","v":21.4}] is a JSON array, but sensor "t" has format number (a bare number such as 21.4): set format: senml if it is a SenML pack`)
}

func TestJSON(t *testing.T) {
	r := newTestRouter(t)
	rd := one(t, route(t, r, "bh/west/rh", `{"rh": 64.5, "ts": "2026-06-01T09:59:30+01:00", "rssi": -71}`))
	assert.Equal(t, 64.5, rd.Sample.Value)
	assert.Equal(t, "rh", rd.Sample.Sensor)
	assert.True(t, rd.Sample.Time.Equal(time.Date(2026, 6, 1, 8, 59, 30, 0, time.UTC)))

	// unix seconds, fractional seconds, milliseconds; null time means arrival.
	ts := time.Date(2026, 6, 1, 10, 0, 0, 0, time.UTC)
	for payload, want := range map[string]time.Time{
		`{"rh": 50, "ts": 1780308000}`:     ts,
		`{"rh": 50, "ts": 1780308000.25}`:  ts.Add(250 * time.Millisecond),
		`{"rh": 50, "ts": 1780308000250}`:  ts.Add(250 * time.Millisecond),
		`{"rh": 50, "ts": null}`:           arrival,
		`{"rh": 50}`:                       arrival,
		`{"rh": "50.0", "ts": 1780308000}`: ts,
	} {
		rd := one(t, route(t, r, "bh/west/rh", payload))
		assert.True(t, want.Equal(rd.Sample.Time), "%s: got %v want %v", payload, rd.Sample.Time, want)
		assert.Equal(t, 50.0, rd.Sample.Value, payload)
	}

	// km/h to m/s: 36 km/h = 10 m/s (definition: 1 km/h = 1/3.6 m/s).
	rd = one(t, route(t, r, "bh/west/u", `{"value": 36, "time": "2026-06-01T10:00:00Z"}`))
	assert.InDelta(t, 10, rd.Sample.Value, 1e-12)
	assert.Equal(t, hourly.Wind, rd.Sample.Quantity)

	for payload, msg := range map[string]string{
		`{"ts": 1780308000}`:            `payload: value key "rh" is missing`,
		`{"rh": null}`:                  `payload: rh is null`,
		`{"rh": true}`:                  `payload: rh: want a number, got true`,
		`{"rh": {"v": 1}}`:              `payload: rh: want a number, got an object`,
		`{"rh": "humid"}`:               `payload: rh: "humid" is not a decimal number`,
		`{"rh": 50, "ts": "yesterday"}`: `payload: ts: "yesterday" is not an RFC 3339 time`,
		`{"rh": 50, "ts": -5}`:          `payload: ts: unix time -5 outside 1970..2200`,
		`{"rh": 50, "ts": [1]}`:         `payload: ts: want an RFC 3339 string or unix seconds/milliseconds, got [1]`,
		`[1, 2]`:                        `payload: want map[string]json.RawMessage, got JSON array`,
		`null`:                          `payload: want a JSON object, got null`,
		`{"rh": 50`:                     `payload: unexpected end of JSON input`,
	} {
		rejected(t, route(t, r, "bh/west/rh", payload), ReasonUnparseable, msg)
	}
}

func TestFields(t *testing.T) {
	r := newTestRouter(t)
	rds, rjs := split(route(t, r, "bh/east/obs",
		`{"at": 1780308000000, "temp": 18.25, "dew": 9.5, "wind": 3.1, "sol": 512, "batt": 3.7, "lux": 20000, "rain_ctr": 17}`))
	at := time.Date(2026, 6, 1, 10, 0, 0, 0, time.UTC)
	require.Len(t, rjs, 1)
	assert.Equal(t, ReasonUnknownField, rjs[0].Reason)
	assert.Equal(t, "obs", rjs[0].Sensor)
	assert.EqualError(t, rjs[0].Err, `field "lux" is not mapped in fields or listed in ignore`)
	require.Len(t, rds, 5, "the unknown field does not stop the others")
	got := map[string]Reading{}
	for _, rd := range rds {
		assert.True(t, at.Equal(rd.Sample.Time))
		assert.Equal(t, "east", rd.Station)
		got[rd.Sample.Sensor] = rd
	}
	assert.Equal(t, 18.25, got["obs.temp"].Sample.Value)
	assert.Equal(t, hourly.DewPoint, got["obs.dew"].Sample.Quantity)
	assert.Equal(t, 512.0, got["obs.sol"].Sample.Value)
	// counter of tips: 17 tips x 0.5 mm; rollover 256 tips = 128 mm.
	ctr := got["obs.rain_ctr"]
	assert.True(t, ctr.Counter)
	assert.Equal(t, 8.5, ctr.Sample.Value)
	assert.Equal(t, 128.0, ctr.Rollover)

	// a null field is "no reading"; a bad field is rejected alone.
	rds, rjs = split(route(t, r, "bh/east/obs", `{"temp": null, "wind": "calm", "sol": 100}`))
	require.Len(t, rds, 1)
	assert.Equal(t, "obs.sol", rds[0].Sample.Sensor)
	assert.True(t, arrival.Equal(rds[0].Sample.Time))
	require.Len(t, rjs, 1)
	assert.Equal(t, "obs.wind", rjs[0].Sensor)
	assert.EqualError(t, rjs[0].Err, `wind: "calm" is not a decimal number`)

	// a bad shared time rejects the whole message.
	rejected(t, route(t, r, "bh/east/obs", `{"at": "soon", "temp": 1}`), ReasonUnparseable,
		`payload: at: "soon" is not an RFC 3339 time`)
}

func TestSenML(t *testing.T) {
	r := newTestRouter(t)
	// Base name, base time, base unit and base value apply to the following
	// records (RFC 8428 section 4.1); t is relative to bt.
	pack := `[
	  {"bn": "east:", "bt": 1780308000, "bu": "Cel", "bver": 10, "n": "temp", "v": 18.5},
	  {"n": "temp", "t": 60, "v": 18.75},
	  {"n": "vp", "u": "hPa", "v": 12.5, "t": 120},
	  {"n": "rn", "u": "W/m2", "v": 412},
	  {"n": "batt", "u": "V", "v": 3.6},
	  {"n": "leaf", "v": 1},
	  {"n": "rain", "u": "mm", "s": 0.4}
	]`
	rds, rjs := split(route(t, r, "bh/east/senml", pack))
	bt := time.Date(2026, 6, 1, 10, 0, 0, 0, time.UTC)
	require.Len(t, rjs, 1)
	assert.Equal(t, ReasonUnknownField, rjs[0].Reason)
	assert.EqualError(t, rjs[0].Err, `senml record "east:leaf" is not mapped in records or listed in ignore`)
	require.Len(t, rds, 5)
	assert.Equal(t, "pack.east:temp", rds[0].Sample.Sensor)
	assert.Equal(t, 18.5, rds[0].Sample.Value)
	assert.True(t, bt.Equal(rds[0].Sample.Time))
	assert.Equal(t, 18.75, rds[1].Sample.Value)
	assert.True(t, bt.Add(time.Minute).Equal(rds[1].Sample.Time))
	assert.Equal(t, hourly.VapourPressure, rds[2].Sample.Quantity)
	assert.InDelta(t, 1.25, rds[2].Sample.Value, 1e-12, "12.5 hPa = 1.25 kPa")
	assert.True(t, bt.Add(2*time.Minute).Equal(rds[2].Sample.Time))
	assert.Equal(t, 412.0, rds[3].Sample.Value)
	assert.Equal(t, 0.4, rds[4].Sample.Value, "a record with only a sum uses it")

	// base value, and times below 2^28 are relative to arrival (RFC 8428 section 4.5.3).
	rds, rjs = split(route(t, r, "bh/east/senml", `[{"bn": "east:", "bv": 20, "n": "temp", "u": "Cel", "v": -1.5, "t": -30}]`))
	require.Empty(t, rjs)
	require.Len(t, rds, 1)
	assert.Equal(t, 18.5, rds[0].Sample.Value)
	assert.True(t, arrival.Add(-30*time.Second).Equal(rds[0].Sample.Time))

	// no time at all: arrival.
	rds, _ = split(route(t, r, "bh/east/senml", `[{"n": "east:temp", "v": 11}]`))
	require.Len(t, rds, 1)
	assert.True(t, arrival.Equal(rds[0].Sample.Time))

	for payload, want := range map[string]struct {
		reason Reason
		msg    string
	}{
		`[{"n": "east:temp", "u": "lx", "v": 1}]`:   {ReasonUnitMismatch, `senml record "east:temp": unit "lx" is not valid for air_temp (accepted: [degC degF K] or their SenML names)`},
		`[{"n": "east:temp", "vs": "warm"}]`:        {ReasonUnparseable, `senml record "east:temp": no numeric value (v or s)`},
		`[{"n": "east:temp", "v": 1, "exp_": 5}]`:   {ReasonUnparseable, `senml record 0: unsupported must-understand label "exp_"`},
		`[{"n": "east:temp", "v": "1"}]`:            {ReasonUnparseable, `senml record 0: want float64, got JSON string`},
		`[{"n": "", "v": 1}]`:                       {ReasonUnparseable, `senml record 0: empty name`},
		`{"n": "east:temp", "v": 1}`:                {ReasonUnparseable, `senml pack: want []json.RawMessage, got JSON object`},
		`[{"n": "east:temp", "v": 99}]`:             {ReasonOutOfRange, `east:temp: air_temp: 99 degC outside -60..60 degC: out of range`},
		`[{"n": "east:temp", "v": 1, "t": 1e300}]`:  {ReasonUnparseable, `senml record "east:temp": unix time 1e+300 outside 1970..2200`},
		`[{"n": "east:temp", "v": 1, "t": -1e300}]`: {ReasonUnparseable, `senml record "east:temp": relative time -1e+300 s is out of range`},
		`[{"bver": 11, "n": "east:temp", "v": 1}]`:  {ReasonUnparseable, `senml record 0: unsupported version 11`},
	} {
		rds, rjs := split(route(t, r, "bh/east/senml", payload))
		assert.Empty(t, rds, payload)
		if assert.Len(t, rjs, 1, payload) {
			assert.Equal(t, want.reason, rjs[0].Reason, payload)
			assert.EqualError(t, rjs[0].Err, want.msg, payload)
		}
	}

	// An ignored record and an empty pack produce nothing.
	rds, rjs = split(route(t, r, "bh/east/senml", `[{"n": "east:batt", "v": 3.3}]`))
	assert.Empty(t, rds)
	assert.Empty(t, rjs)
}

func TestRanges(t *testing.T) {
	r := newTestRouter(t)
	rejected(t, route(t, r, "bh/west/t", "812"), ReasonOutOfRange, "air_temp: 812 degC outside -60..60 degC: out of range")
	rejected(t, route(t, r, "bh/west/tf", "212"), ReasonOutOfRange, "air_temp: 212 degF (100 degC) outside -60..60 degC: out of range")
	rejected(t, route(t, r, "bh/west/rh", `{"rh": 104}`), ReasonOutOfRange, "rel_humidity: 104 % outside 0..103 %: out of range")
	one(t, route(t, r, "bh/west/rh", `{"rh": 102.5}`)) // within the over-read tolerance
	rejected(t, route(t, r, "bh/west/u", `{"value": -3.6}`), ReasonOutOfRange, "wind: -3.6 km/h (-1 m/s) outside 0..75 m/s: out of range")
	rejected(t, route(t, r, "bh/west/rs", "1700"), ReasonOutOfRange, "solar: 1700 W/m2 outside -20..1600 W/m2: out of range")
	one(t, route(t, r, "bh/west/rs", "-4")) // night offset
	// every quantity has a range
	for _, q := range hourly.Quantities {
		_, ok := PhysicalRanges[q]
		assert.True(t, ok, q)
	}
}

func TestRain(t *testing.T) {
	r := newTestRouter(t)
	rd := one(t, route(t, r, "bh/west/tips", "3"))
	assert.InDelta(t, 0.6, rd.Sample.Value, 1e-12)
	assert.False(t, rd.Counter)
	rejected(t, route(t, r, "bh/west/tips", "-1"), ReasonOutOfRange, "rain: -1 tips outside 0..10000: out of range")
	rejected(t, route(t, r, "bh/west/tips", "2700"), ReasonOutOfRange, "rain: 2700 tips (540 mm) outside 0..500 mm: out of range")

	// 0.5 in = 12.7 mm (1 in = 25.4 mm by definition).
	rd = one(t, route(t, r, "bh/west/inc", "0.5"))
	assert.InDelta(t, 12.7, rd.Sample.Value, 1e-12)
	rejected(t, route(t, r, "bh/west/inc", "-0.01"), ReasonOutOfRange, "rain: -0.01 in (-0.254 mm) outside 0..500 mm: out of range")

	rd = one(t, route(t, r, "bh/west/ctr", "12.5"))
	assert.True(t, rd.Counter)
	assert.InDelta(t, 317.5, rd.Sample.Value, 1e-9)
	assert.InDelta(t, 2540, rd.Rollover, 1e-9)
	rejected(t, route(t, r, "bh/west/ctr", "100"), ReasonOutOfRange, "rain counter: 100 is not below rollover_at 100: out of range")
	rejected(t, route(t, r, "bh/west/ctr", "-2"), ReasonOutOfRange, "rain counter: -2 is negative: out of range")
}

func TestCounterIncrement(t *testing.T) {
	for _, c := range []struct {
		name                 string
		prev, cur, roll, inc float64
	}{
		{"rising", 10.2, 11.0, 0, 0.8},
		{"unchanged", 5, 5, 100, 0},
		{"wrapped once", 99.5, 0.3, 100, 0.8},
		{"wrapped to zero", 99.5, 0, 100, 0.5},
		{"reset without rollover counts from zero", 250, 1.2, 0, 1.2},
	} {
		got, err := CounterIncrement(c.prev, c.cur, c.roll)
		require.NoError(t, err, c.name)
		assert.InDelta(t, c.inc, got, 1e-9, c.name)
	}
	for _, c := range []struct{ prev, cur, roll float64 }{
		{-1, 2, 0}, {1, math.NaN(), 0}, {1, 2, math.Inf(1)}, {100, 2, 100}, {1, 150, 100},
	} {
		_, err := CounterIncrement(c.prev, c.cur, c.roll)
		assert.ErrorIs(t, err, ErrCounter, "%v", c)
	}
}

func TestUnknownTopicAndSize(t *testing.T) {
	r := newTestRouter(t)
	rds, rjs := split(route(t, r, "bh/west/soil", "1"))
	assert.Empty(t, rds)
	require.Len(t, rjs, 1)
	assert.Equal(t, Rejection{Reason: ReasonUnknownTopic, Err: rjs[0].Err}, rjs[0])
	assert.EqualError(t, rjs[0].Err, `no sensor is configured for topic "bh/west/soil"`)
	assert.Equal(t, `unknown_topic: no sensor is configured for topic "bh/west/soil"`, rjs[0].Error())

	big := make([]byte, 2049)
	rds, rjs = r.Route("bh/west/t", big, arrival)
	assert.Empty(t, rds)
	require.Len(t, rjs, 1)
	assert.Equal(t, ReasonTooLarge, rjs[0].Reason)
	assert.EqualError(t, rjs[0].Err, "payload of 2049 bytes exceeds max_payload_bytes 2048")
	assert.Equal(t, "too_large: brackenholm/west/t: payload of 2049 bytes exceeds max_payload_bytes 2048", rjs[0].Error())
}

func BenchmarkRouteFields(b *testing.B) {
	r := newTestRouter(b)
	p := []byte(`{"at": 1780308000000, "temp": 18.25, "dew": 9.5, "wind": 3.1, "sol": 512, "batt": 3.7, "rain_ctr": 17}`)
	b.ReportAllocs()
	for b.Loop() {
		r.Route("bh/east/obs", p, arrival)
	}
}

func BenchmarkRouteNumber(b *testing.B) {
	r := newTestRouter(b)
	p := []byte(`21.5`)
	b.ReportAllocs()
	for b.Loop() {
		r.Route("bh/west/t", p, arrival)
	}
}

func BenchmarkRouteSenML(b *testing.B) {
	r := newTestRouter(b)
	p := []byte(`[{"bn":"east:","bt":1780308000,"n":"temp","u":"Cel","v":18.5},{"n":"vp","u":"kPa","v":1.2},{"n":"rn","u":"W/m2","v":412}]`)
	b.ReportAllocs()
	for b.Loop() {
		r.Route("bh/east/senml", p, arrival)
	}
}

func split(res result) ([]Reading, []Rejection) { return res.rds, res.rjs }

func TestSenMLMustUnderstandEscaped(t *testing.T) {
	r := newTestRouter(t)
	// "x\u005f" is the label "x_" with its underscore escaped.
	rejected(t, route(t, r, "bh/east/senml", `[{"n": "east:temp", "v": 1, "x\u005f": 2}]`), ReasonUnparseable,
		`senml record 0: unsupported must-understand label "x_"`)
}

// A reading whose message carries no time of its own is marked: the
// pipeline does not let it drive the station's clock while the station's
// timestamped readings flow.
func TestArrivalStampedMarked(t *testing.T) {
	r := newTestRouter(t)
	for _, c := range []struct {
		topic, payload string
		want           bool
	}{
		{"bh/west/t", "21.5", true},
		{"bh/west/rh", `{"rh": 64.5}`, true},
		{"bh/west/rh", `{"rh": 64.5, "ts": null}`, true},
		{"bh/west/rh", `{"rh": 64.5, "ts": "2026-06-01T09:59:30+01:00"}`, false},
		{"bh/east/senml", `[{"n": "east:temp", "v": 11}]`, true},
		{"bh/east/senml", `[{"n": "east:temp", "v": 11, "t": -30}]`, true},
		{"bh/east/senml", `[{"bt": 1780308000, "n": "east:temp", "v": 11}]`, false},
	} {
		rds, rjs := split(route(t, r, c.topic, c.payload))
		require.Empty(t, rjs, c.payload)
		require.Len(t, rds, 1, c.payload)
		assert.Equal(t, c.want, rds[0].ArrivalStamped, c.payload)
	}
}
