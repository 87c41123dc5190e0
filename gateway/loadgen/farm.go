package loadgen

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"etpulse/gateway/config"
	"etpulse/hourly"
)

// The invented farm the load runs against: Corrigan Vale, a row-crop and
// vineyard operation with one weather station per block. Its weather is a
// smooth deterministic function of time, so readings never trip the drift
// checks and every hour has full coverage.
const (
	farmSite   = "corrigan-vale"
	farmLat    = 38.42
	farmLon    = -121.55
	farmElev   = 12.0
	farmOffset = -8 // standard time, whole hours so hours align with UTC hours
)

// SimStart is the first reading time of a load run: local standard midnight
// of an invented summer day at the farm.
var SimStart = time.Date(2026, 7, 6, 8, 0, 0, 0, time.UTC)

// payload formats of the stations, assigned round-robin so every run mixes
// them.
type stationKind int

const (
	kindMast   stationKind = iota // one JSON topic per sensor
	kindBox                       // one JSON object with every quantity, US units
	kindLogger                    // a SenML pack
	numKinds
)

// station is one simulated weather station of the farm.
type station struct {
	idx    int
	id     string
	kind   stationKind
	topics []string      // in publication order within a tick
	offset time.Duration // phase of its readings within the interval
	dT     float64       // warmer or cooler block, °C
	geo    hourly.Station
}

// farm is the set of simulated stations and their topics.
type farm struct {
	root     string // first topic level, unique per run
	interval time.Duration
	stations []*station
	byID     map[string]int
	perTick  int // messages per tick, all stations
}

func newFarm(n int, root string, interval time.Duration) *farm {
	f := &farm{root: root, interval: interval, byID: map[string]int{}}
	for i := 0; i < n; i++ {
		st := &station{
			idx:  i,
			id:   fmt.Sprintf("block-%02d", i+1),
			kind: stationKind(i % int(numKinds)),
			// Spread the stations' readings over the interval, whole seconds.
			offset: time.Duration(i*7%max(1, int(interval/time.Second))) * time.Second,
			dT:     float64(i%5)*0.4 - 0.8,
			geo:    hourly.Station{Latitude: farmLat, Longitude: farmLon, Elevation: farmElev, UTCOffset: farmOffset},
		}
		base := root + "/" + st.id + "/"
		switch st.kind {
		case kindMast:
			st.topics = []string{base + "air", base + "rh", base + "wind", base + "sun"}
		case kindBox:
			st.topics = []string{base + "obs"}
		case kindLogger:
			st.topics = []string{base + "pack"}
		}
		f.stations = append(f.stations, st)
		f.byID[st.id] = i
		f.perTick += len(st.topics)
	}
	return f
}

// readingTime is station st's reading time at tick k.
func (f *farm) readingTime(st *station, k int) time.Time {
	return SimStart.Add(time.Duration(k)*f.interval + st.offset)
}

// tickTime is the start of tick k.
func (f *farm) tickTime(k int) time.Time { return SimStart.Add(time.Duration(k) * f.interval) }

// closingHour reports the end of the hour that station st's reading at tick k
// is the first to close (its reading time is the first past the hour's end
// plus the close grace), if any.
func (f *farm) closingHour(st *station, k int) (time.Time, bool) {
	if k == 0 {
		return time.Time{}, false
	}
	at := f.readingTime(st, k).Add(-config.DefaultCloseGrace)
	prev := f.readingTime(st, k-1).Add(-config.DefaultCloseGrace)
	end := at.Truncate(time.Hour)
	if !end.After(SimStart) || prev.Compare(end) >= 0 {
		return time.Time{}, false
	}
	return end, true
}

// hoursClosed returns how many hours station st's readings up to and
// including tick last close by data: those whose end plus the close grace is
// not after the last reading.
func (f *farm) hoursClosed(st *station, last int) int {
	if last < 0 {
		return 0
	}
	d := f.readingTime(st, last).Sub(SimStart) - config.DefaultCloseGrace
	if d < 0 {
		return 0
	}
	return int(d / time.Hour)
}

// weather is the true state at one station and instant, canonical units.
type weather struct{ t, td, rh, wind, solar float64 }

func (f *farm) weatherAt(st *station, at time.Time) weather {
	local := at.Add(farmOffset * time.Hour)
	h := float64(local.Hour()) + float64(local.Minute())/60 + float64(local.Second())/3600
	x := float64(at.Unix()) / 3600
	var w weather
	w.t = 23 + st.dT + 9*math.Cos(2*math.Pi*(h-15)/24) + 0.3*math.Sin(1.3*x+float64(st.idx))
	w.td = 11 + 0.2*float64(st.idx%4) + 1.2*math.Sin(2*math.Pi*h/24)
	w.td = math.Min(w.td, w.t-1)
	w.rh = math.Min(100, 100*hourly.SatVapourPressure(w.td)/hourly.SatVapourPressure(w.t))
	w.wind = 2.6 + 1.4*math.Cos(2*math.Pi*(h-14)/24) + 0.35*math.Sin(3.1*x+float64(st.idx))
	// 0.7 of the top-of-atmosphere irradiance on a horizontal surface (solar
	// constant 1361 W/m2, from memory): against Rso = 0.75 Ra (FAO-56 eq. 37
	// at sea level) a clear day with Rs/Rso near 0.7/0.75 x 1361/1367/0.97
	// = 0.96 in July, inside the radiation checks' bands. Invented weather.
	sp := hourly.SunForPeriod(st.geo, at, f.interval)
	w.solar = math.Max(0, 0.7*1361*sp.SinBeta)
	return w
}

// messages appends station st's messages of tick k to out as (topic,
// payload) pairs.
func (f *farm) messages(st *station, k int, out []outMsg) []outMsg {
	at := f.readingTime(st, k)
	w := f.weatherAt(st, at)
	num := func(b []byte, v float64, dec int) []byte { return strconv.AppendFloat(b, v, 'f', dec, 64) }
	switch st.kind {
	case kindMast:
		ts := at.Format(time.RFC3339)
		one := func(topic string, v float64, dec int) outMsg {
			b := make([]byte, 0, 56)
			b = append(b, `{"value":`...)
			b = num(b, v, dec)
			b = append(b, `,"time":"`...)
			b = append(b, ts...)
			b = append(b, `"}`...)
			return outMsg{topic: topic, payload: b}
		}
		out = append(out, one(st.topics[0], w.t, 2), one(st.topics[1], w.rh, 1),
			one(st.topics[2], w.wind, 2), one(st.topics[3], w.solar, 1))
	case kindBox:
		b := make([]byte, 0, 128)
		b = append(b, `{"ts":`...)
		b = strconv.AppendInt(b, at.Unix(), 10)
		b = append(b, `,"air_f":`...)
		b = num(b, hourly.CelsiusToFahrenheit(w.t), 2)
		b = append(b, `,"dew_f":`...)
		b = num(b, hourly.CelsiusToFahrenheit(w.td), 2)
		b = append(b, `,"wind_mph":`...)
		b = num(b, w.wind/hourly.MphToMS(1), 2)
		b = append(b, `,"sun_wm2":`...)
		b = num(b, w.solar, 1)
		b = append(b, `,"rain_in":0,"batt":3.92}`...)
		out = append(out, outMsg{topic: st.topics[0], payload: b})
	case kindLogger:
		b := make([]byte, 0, 160)
		b = append(b, `[{"bn":"`...)
		b = append(b, st.id...)
		b = append(b, `:","bt":`...)
		b = strconv.AppendInt(b, at.Unix(), 10)
		b = append(b, `,"n":"temp","u":"Cel","v":`...)
		b = num(b, w.t, 2)
		b = append(b, `},{"n":"hum","u":"%RH","v":`...)
		b = num(b, w.rh, 1)
		b = append(b, `},{"n":"wind","v":`...)
		b = num(b, w.wind/hourly.KmhToMS(1), 1)
		b = append(b, `},{"n":"sun","v":`...)
		b = num(b, w.solar, 1)
		b = append(b, `}]`...)
		out = append(out, outMsg{topic: st.topics[0], payload: b})
	}
	return out
}

// badPayload is a malformed message injected on purpose: the gateway must
// reject it (unparseable) and keep going.
var badPayload = []byte(`{"value": "n/a"`)

// outMsg is one message to publish.
type outMsg struct {
	topic   string
	payload []byte
	bad     bool
	station int   // index of the station
	closes  int64 // end (Unix seconds) of the station's hour this reading closes; 0 for none
}

// configYAML returns the gateway configuration of the farm.
func (f *farm) configYAML(brokerURL, clientID, statePath string) string {
	var b strings.Builder
	fmt.Fprintf(&b, "# Corrigan Vale, the invented farm of the load run.\nbroker:\n  url: %q\n  client_id: %q\n", brokerURL, clientID)
	fmt.Fprintf(&b, "http:\n  disabled: true\nstate:\n  path: %q\nsites:\n  - id: %s\n    stations:\n", statePath, farmSite)
	for _, st := range f.stations {
		ref := [...]string{"tall", "short", "fao56"}[st.kind]
		fmt.Fprintf(&b, "      - id: %s\n        latitude: %g\n        longitude: %g\n        elevation_m: %g\n        utc_offset_hours: %d\n        reference: %s\n        sensors:\n",
			st.id, farmLat, farmLon, farmElev, farmOffset, ref)
		switch st.kind {
		case kindMast:
			for i, sn := range []struct{ id, q, unit string }{{"air", "air_temp", "degC"}, {"rh", "rel_humidity", "%"}, {"wind", "wind", "m/s"}, {"sun", "solar", "W/m2"}} {
				fmt.Fprintf(&b, "          - {id: %s, topic: %q, format: json, quantity: %s, unit: %q}\n", sn.id, st.topics[i], sn.q, sn.unit)
			}
		case kindBox:
			fmt.Fprintf(&b, "          - id: obs\n            topic: %q\n            format: fields\n            time_key: ts\n            ignore: [batt]\n            fields:\n", st.topics[0])
			b.WriteString("              air_f: {quantity: air_temp, unit: degF}\n              dew_f: {quantity: dew_point, unit: degF}\n" +
				"              wind_mph: {quantity: wind, unit: mph}\n              sun_wm2: {quantity: solar, unit: W/m2}\n" +
				"              rain_in: {quantity: rain, unit: in}\n")
		case kindLogger:
			fmt.Fprintf(&b, "          - id: pack\n            topic: %q\n            format: senml\n            records:\n", st.topics[0])
			fmt.Fprintf(&b, "              \"%[1]s:temp\": {quantity: air_temp, unit: degC}\n              \"%[1]s:hum\": {quantity: rel_humidity, unit: \"%%\"}\n"+
				"              \"%[1]s:wind\": {quantity: wind, unit: km/h}\n              \"%[1]s:sun\": {quantity: solar, unit: W/m2}\n", st.id)
		}
	}
	return b.String()
}
