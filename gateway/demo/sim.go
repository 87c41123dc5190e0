// Package demo runs the gateway against a simulated farm: an embedded MQTT
// broker, invented weather stations publishing in mixed payload formats on an
// accelerated clock, the real pipeline, and a live table of closed hours.
//
// The farm, Tallowwood Flats, is invented: an apple orchard mast, an
// all-in-one station on the open paddock, and a glasshouse logger. Its
// weather is a deterministic function of the seed.
package demo

import (
	"bufio"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
	"time"

	"etpulse/gateway/config"
	"etpulse/hourly"
)

// Kind tells what a simulated message is.
type Kind int

// The kinds of messages the simulator publishes.
const (
	Normal    Kind = iota // on time, or a little out of order
	Duplicate             // the same message again (as a QoS 1 redelivery would be)
	Late                  // held back for hours: reaches a closed hour
	Bad                   // malformed or out of physical range: must be rejected
)

func (k Kind) String() string {
	return [...]string{"normal", "duplicate", "late", "bad"}[k]
}

// Fault alters a sensor's true value (canonical unit) at time t, e.g. a
// pyranometer losing sensitivity. Faults are keyed "<station>/<sensor>".
type Fault func(t time.Time, v float64) float64

// Truth is one sample a message carries, as the gateway should decode it.
type Truth struct {
	Station string
	Sample  hourly.Sample // canonical unit; Sensor as the ingest package names it
}

// Message is one simulated MQTT publication.
type Message struct {
	At      time.Time // when it is published (simulated time)
	Time    time.Time // the reading time it carries
	Topic   string
	Payload []byte
	Kind    Kind
	Samples []Truth // nil for Bad messages
}

// Options configure the simulator.
type Options struct {
	Seed      uint64
	Start     time.Time     // first reading; default DefaultStart
	Interval  time.Duration // between readings of one sensor; default 1m
	TopicRoot string        // first topic level; default "tallowwood"
	// Stations limits the farm to these station ids; empty means all.
	Stations []string
	Faults   map[string]Fault
	// Scripted makes the first local day's weather follow the demo's
	// forecast feed: rain after the correct forecast, none after the wrong
	// one (and no other rain that day).
	Scripted bool
	// Rates of injected messages, per normal message. Negative disables.
	DupRate, LateRate, BadRate, ShuffleRate float64
}

// The stations of the farm.
const (
	Orchard    = "orchard"
	Paddock    = "paddock"
	Glasshouse = "glasshouse"
	// Site is the farm's site id.
	Site = "tallowwood"
)

// DefaultStart is local midnight of an invented summer day at the farm
// (UTC+10 standard time).
var DefaultStart = time.Date(2026, 1, 11, 14, 0, 0, 0, time.UTC)

// farm geography, invented: south-east of a continent, summer in January.
const (
	farmLat    = -36.35
	farmLon    = 146.70
	farmElev   = 180.0
	farmOffset = 10.0
)

// Sim generates the farm's messages deterministically from its seed.
type Sim struct {
	o       Options
	weather map[string]*stationWeather
}

// New returns a simulator.
func New(o Options) *Sim {
	if o.Start.IsZero() {
		o.Start = DefaultStart
	}
	if o.Interval <= 0 {
		o.Interval = time.Minute
	}
	if o.TopicRoot == "" {
		o.TopicRoot = "tallowwood"
	}
	def := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
		if *v < 0 {
			*v = 0
		}
	}
	def(&o.DupRate, 0.01)
	def(&o.LateRate, 0.003)
	def(&o.BadRate, 0.004)
	def(&o.ShuffleRate, 0.02)
	if len(o.Stations) == 0 {
		o.Stations = []string{Orchard, Paddock, Glasshouse}
	}
	s := &Sim{o: o, weather: map[string]*stationWeather{}}
	for i, id := range o.Stations {
		s.weather[id] = newStationWeather(id, o.Seed*7919+uint64(i)+1)
		if o.Scripted {
			s.weather[id].scripted = o.Start.Add(time.Duration(farmOffset*float64(time.Hour))).Unix() / 86400
		}
	}
	return s
}

// Start returns the first reading time.
func (s *Sim) Start() time.Time { return s.o.Start }

// Topic returns a topic under the simulator's root.
func (s *Sim) Topic(parts ...string) string {
	return s.o.TopicRoot + "/" + strings.Join(parts, "/")
}

// Generate returns every message with a reading time in [from, to), sorted
// by publication time. Late messages may be published after to.
func (s *Sim) Generate(from, to time.Time) []Message {
	rng := rand.New(rand.NewPCG(s.o.Seed, uint64(from.Unix())))
	var out []Message
	for at := from; at.Before(to); at = at.Add(s.o.Interval) {
		for _, id := range s.o.Stations {
			for _, m := range s.messagesAt(id, at) {
				out = append(out, s.inject(rng, m)...)
			}
		}
	}
	slices.SortStableFunc(out, func(a, b Message) int { return a.At.Compare(b.At) })
	return out
}

// inject decides what happens to one normal message.
func (s *Sim) inject(rng *rand.Rand, m Message) []Message {
	m.At = m.Time
	out := []Message{}
	r := rng.Float64()
	switch {
	case r < s.o.LateRate:
		m.Kind = Late
		m.At = m.Time.Add(130*time.Minute + time.Duration(rng.IntN(50))*time.Minute)
	case r < s.o.LateRate+s.o.ShuffleRate:
		m.At = m.Time.Add(time.Duration(1+rng.IntN(90)) * time.Second)
	}
	out = append(out, m)
	if rng.Float64() < s.o.DupRate {
		d := m
		d.Kind = Duplicate
		d.At = m.At.Add(time.Duration(1+rng.IntN(20)) * time.Second)
		out = append(out, d)
	}
	if rng.Float64() < s.o.BadRate {
		b := Message{At: m.Time.Add(time.Second), Time: m.Time, Topic: m.Topic, Kind: Bad}
		b.Payload = badPayload(rng, m.Payload)
		out = append(out, b)
	}
	return out
}

func badPayload(rng *rand.Rand, good []byte) []byte {
	switch rng.IntN(4) {
	case 0:
		return good[:len(good)/2] // truncated
	case 1:
		return []byte(`{"value": "n/a"}`)
	case 2:
		return []byte("\x00\xff garbage")
	default:
		// A physically impossible value in an otherwise valid payload.
		s := string(good)
		if i := strings.IndexAny(s, "0123456789"); i >= 0 {
			return []byte(s[:i] + "9999" + s[i:])
		}
		return []byte("9999")
	}
}

// weather is the true state of one station at one instant, canonical units.
type weather struct {
	T, Td, RH, Wind, Solar, Rain float64 // Rain: mm since the previous reading
}

// messagesAt returns the normal messages of one station at reading time at.
func (s *Sim) messagesAt(id string, at time.Time) []Message {
	w := s.weather[id].at(at, s.o.Interval)
	f := func(sensor string, v float64) float64 {
		if fault := s.o.Faults[id+"/"+sensor]; fault != nil {
			return fault(at, v)
		}
		return v
	}
	switch id {
	case Orchard:
		return s.orchard(at, w, f)
	case Paddock:
		return s.paddock(at, w, f)
	case Glasshouse:
		return s.glasshouse(at, w, f)
	}
	return nil
}

// num formats v with the given decimals and returns the text and the value
// the gateway will parse from it.
func num(v float64, decimals int) (string, float64) {
	txt := strconv.FormatFloat(v, 'f', decimals, 64)
	back, _ := strconv.ParseFloat(txt, 64)
	return txt, back
}

func canon(q hourly.Quantity, unit string, v float64) float64 {
	c, err := hourly.ToCanonical(q, unit, v)
	if err != nil {
		panic(fmt.Sprintf("demo: unit table: %v", err)) // programming error: units below are fixed
	}
	return c
}

func truth(station, sensor string, q hourly.Quantity, at time.Time, v float64) Truth {
	return Truth{Station: station, Sample: hourly.Sample{Sensor: sensor, Quantity: q, Time: at, Value: v}}
}

// orchard: one topic per sensor, JSON {"value": v, "time": RFC 3339}; the
// rain gauge publishes bare tip counts (arrival time) when it tips.
func (s *Sim) orchard(at time.Time, w weather, f func(string, float64) float64) []Message {
	ts := at.UTC().Format(time.RFC3339)
	var out []Message
	add := func(sensor string, q hourly.Quantity, unit string, v float64, dec int) {
		txt, back := num(v, dec)
		out = append(out, Message{Time: at, Topic: s.Topic(Orchard, sensor),
			Payload: []byte(`{"value":` + txt + `,"time":"` + ts + `"}`),
			Samples: []Truth{truth(Orchard, sensor, q, at, canon(q, unit, back))}})
	}
	add("air", hourly.AirTemp, "degC", f("air", w.T), 2)
	add("rh", hourly.RelHumidity, "%", f("rh", w.RH), 1)
	add("wind", hourly.Wind, "km/h", f("wind", w.Wind)/hourly.KmhToMS(1), 1)
	add("solar", hourly.Solar, "W/m2", f("solar", w.Solar), 1)
	if tips := math.Floor(f("rain", w.Rain) / 0.2); tips > 0 {
		out = append(out, Message{Time: at, Topic: s.Topic(Orchard, "rain"),
			Payload: []byte(strconv.Itoa(int(tips))),
			Samples: []Truth{truth(Orchard, "rain", hourly.Rain, at, tips*0.2)}})
	}
	return out
}

// paddock: an all-in-one station, one JSON object per reading with US units.
func (s *Sim) paddock(at time.Time, w weather, f func(string, float64) float64) []Message {
	var truths []Truth
	var b strings.Builder
	fmt.Fprintf(&b, `{"ts":%d`, at.UnixMilli())
	field := func(key string, q hourly.Quantity, unit string, v float64, dec int) {
		txt, back := num(v, dec)
		fmt.Fprintf(&b, `,"%s":%s`, key, txt)
		truths = append(truths, truth(Paddock, "obs."+key, q, at, canon(q, unit, back)))
	}
	field("temp_f", hourly.AirTemp, "degF", hourly.CelsiusToFahrenheit(f("temp", w.T)), 2)
	field("dewpt_f", hourly.DewPoint, "degF", hourly.CelsiusToFahrenheit(f("dewpt", w.Td)), 2)
	field("wind_mph", hourly.Wind, "mph", f("wind", w.Wind)/hourly.MphToMS(1), 2)
	field("solar_wm2", hourly.Solar, "W/m2", f("solar", w.Solar), 1)
	field("rain_in", hourly.Rain, "in", hourly.MMToInches(f("rain", w.Rain)), 3)
	b.WriteString(`,"batt_v":3.91}`)
	return []Message{{Time: at, Topic: s.Topic(Paddock, "obs"), Payload: []byte(b.String()), Samples: truths}}
}

// glasshouse: air temperature as JSON {"t": RFC 3339, "degC": v}, the rest
// as a SenML pack every other reading.
func (s *Sim) glasshouse(at time.Time, w weather, f func(string, float64) float64) []Message {
	txt, back := num(f("air", w.T), 2)
	out := []Message{{Time: at, Topic: s.Topic(Glasshouse, "air"),
		Payload: []byte(`{"t":"` + at.UTC().Format(time.RFC3339) + `","degC":` + txt + `}`),
		Samples: []Truth{truth(Glasshouse, "air", hourly.AirTemp, at, back)}}}
	if (at.Unix()/int64(s.o.Interval/time.Second))%2 != 0 {
		return out
	}
	var truths []Truth
	recs := []map[string]any{{"bn": "gh-a:", "bt": at.Unix()}}
	rec := func(name string, q hourly.Quantity, unit, senmlUnit string, v float64, dec int) {
		txt, back := num(v, dec)
		recs = append(recs, map[string]any{"n": name, "u": senmlUnit, "v": json.Number(txt)})
		truths = append(truths, truth(Glasshouse, "pack.gh-a:"+name, q, at, canon(q, unit, back)))
	}
	rec("rh", hourly.RelHumidity, "%", "%RH", f("rh", w.RH), 1)
	rec("airflow", hourly.Wind, "m/s", "m/s", f("wind", w.Wind), 2)
	rec("sol", hourly.Solar, "W/m2", "W/m2", f("solar", w.Solar), 1)
	payload, _ := json.Marshal(recs)
	out = append(out, Message{Time: at, Topic: s.Topic(Glasshouse, "pack"), Payload: payload, Samples: truths})
	return out
}

// stationWeather is one station's weather process.
type stationWeather struct {
	id   string
	seed uint64
	st   hourly.Station
	// per station character
	tMean, tAmp, windBase, windAmp, transmit float64
	// scripted is the local day (Unix days) whose rain follows the
	// forecast script; 0: none.
	scripted int64
}

func newStationWeather(id string, seed uint64) *stationWeather {
	w := &stationWeather{id: id, seed: seed,
		st:    hourly.Station{Latitude: farmLat, Longitude: farmLon, Elevation: farmElev, UTCOffset: farmOffset},
		tMean: 21, tAmp: 7, windBase: 2.2, windAmp: 1.3, transmit: 1}
	switch id {
	case Paddock:
		w.tMean, w.tAmp, w.windBase, w.windAmp = 22, 8, 3.0, 1.8
	case Glasshouse:
		w.tMean, w.tAmp, w.windBase, w.windAmp, w.transmit = 25, 5, 0.4, 0.2, 0.62
	}
	return w
}

// dayState is the weather character of one local day, drawn from the seed.
type dayState struct {
	cloud     float64 // 0 clear .. 1 overcast
	tShift    float64 // warmer or cooler day, °C
	dryness   float64 // dew point depression at dawn, °C
	rainStart float64 // local hour a shower starts; <0 none
	rainHours float64
	rainRate  float64 // mm/h
}

func (w *stationWeather) day(local time.Time) dayState {
	d := local.Unix() / 86400
	r := rand.New(rand.NewPCG(w.seed, uint64(d)))
	ds := dayState{cloud: math.Pow(r.Float64(), 2) * 0.8, tShift: r.NormFloat64() * 1.5, dryness: 2 + 4*r.Float64(), rainStart: -1}
	if r.Float64() < 0.3 {
		ds.rainStart = 13 + 5*r.Float64()
		ds.rainHours = 0.5 + 1.5*r.Float64()
		ds.rainRate = 1 + 5*r.Float64()
	}
	if w.scripted != 0 && d == w.scripted {
		ds.rainStart, ds.rainHours, ds.rainRate = scriptedRain()
	}
	return ds
}

// at returns the true weather at t; interval sizes the rain increment.
func (w *stationWeather) at(t time.Time, interval time.Duration) weather {
	local := t.Add(time.Duration(farmOffset * float64(time.Hour)))
	ds := w.day(local)
	h := float64(local.Hour()) + float64(local.Minute())/60 + float64(local.Second())/3600
	// Smooth noise from a few incommensurate sines keyed to the seed.
	ph := float64(w.seed%1000) / 1000 * 2 * math.Pi
	x := float64(t.Unix()) / 3600
	noise := 0.4*math.Sin(1.7*x+ph) + 0.25*math.Sin(4.3*x+2*ph) + 0.15*math.Sin(11.1*x+3*ph)

	raining := ds.rainStart >= 0 && h >= ds.rainStart && h < ds.rainStart+ds.rainHours
	cloud := ds.cloud + 0.15*math.Sin(2.9*x+ph)
	if raining {
		cloud = 0.95
	}
	cloud = math.Min(math.Max(cloud, 0), 1)

	var out weather
	out.T = w.tMean + ds.tShift + w.tAmp*math.Cos(2*math.Pi*(h-15)/24) + noise
	tMin := w.tMean + ds.tShift - w.tAmp
	out.Td = tMin - ds.dryness + 0.5*noise
	if raining {
		out.T -= 3
		out.Td = out.T - 0.5
	}
	out.Td = math.Min(out.Td, out.T-0.3)
	ea, _ := hourly.VapourPressureFromDewPoint(out.Td)
	out.RH = math.Min(100, 100*ea/hourly.SatVapourPressure(out.T))
	out.Wind = math.Max(0.1, w.windBase+w.windAmp*math.Cos(2*math.Pi*(h-14)/24)+0.6*noise*w.windBase/2)

	sp := hourly.SunForPeriod(w.st, t, time.Minute)
	clear := math.Max(0, 1361*0.75*sp.SinBeta) // rough clear-sky global radiation, W m-2
	out.Solar = clear * (1 - 0.75*cloud) * w.transmit
	if w.id == Glasshouse {
		return out // no rain under glass
	}
	if raining {
		out.Rain = ds.rainRate * interval.Hours()
	}
	return out
}

// ConfigOptions are the gateway settings of the simulated farm's config.
type ConfigOptions struct {
	BrokerURL, ClientID, StatePath string
	CloseGrace, LateWindow         time.Duration // default 5m, 6h
	SilenceClose, MaxFuture        time.Duration // default 20m, 5m
}

// ConfigYAML returns the gateway configuration of the simulated farm.
func (s *Sim) ConfigYAML(o ConfigOptions) string {
	d := func(v, def time.Duration) string {
		if v <= 0 {
			v = def
		}
		return v.String()
	}
	var b strings.Builder
	fmt.Fprintf(&b, "# Tallowwood Flats, the invented farm of the demo.\nbroker:\n  url: %q\n  client_id: %q\n", o.BrokerURL, o.ClientID)
	// Metrics and health on any free loopback port: demos and tests may run side by side.
	fmt.Fprintf(&b, "http:\n  listen: \"127.0.0.1:0\"\n")
	if zonesYAML(s.o.Stations) != "" {
		// The soil-moisture probe's plausible range, % by volume (above 60 %
		// is no mineral soil: common practice, no source).
		b.WriteString("alerts:\n  quantities:\n    soil_water: {min: 0.5, max: 60}\n")
	}
	fmt.Fprintf(&b, "state:\n  path: %q\nsites:\n  - id: %s\n    stations:\n", o.StatePath, Site)
	timing := fmt.Sprintf("        close_grace: %s\n        late_window: %s\n        silence_close: %s\n        max_future: %s\n",
		d(o.CloseGrace, 5*time.Minute), d(o.LateWindow, 6*time.Hour), d(o.SilenceClose, 20*time.Minute), d(o.MaxFuture, 5*time.Minute))
	station := func(id, ref string, windHeight float64) {
		fmt.Fprintf(&b, "      - id: %s\n        latitude: %g\n        longitude: %g\n        elevation_m: %g\n        utc_offset_hours: %g\n        reference: %s\n        wind_height_m: %g\n%s        sensors:\n",
			id, farmLat, farmLon, farmElev, farmOffset, ref, windHeight, timing)
	}
	for _, id := range s.o.Stations {
		switch id {
		case Orchard:
			station(Orchard, "tall", 3)
			for _, sn := range []struct{ id, q, unit string }{{"air", "air_temp", "degC"}, {"rh", "rel_humidity", "%"}, {"wind", "wind", "km/h"}, {"solar", "solar", "W/m2"}} {
				fmt.Fprintf(&b, "          - {id: %s, topic: %q, format: json, quantity: %s, unit: %q}\n", sn.id, s.Topic(Orchard, sn.id), sn.q, sn.unit)
			}
			fmt.Fprintf(&b, "          - {id: rain, topic: %q, format: number, quantity: rain, rain_mode: tips, mm_per_tip: 0.2}\n", s.Topic(Orchard, "rain"))
			fmt.Fprintf(&b, "          - {id: %s, topic: %q, format: json, quantity: soil_water, unit: \"%%\"}\n", probeSensor, s.Topic(Orchard, probeSensor))
		case Paddock:
			station(Paddock, "short", 2)
			fmt.Fprintf(&b, "          - id: obs\n            topic: %q\n            format: fields\n            time_key: ts\n            ignore: [batt_v]\n            fields:\n", s.Topic(Paddock, "obs"))
			b.WriteString("              temp_f: {quantity: air_temp, unit: degF}\n              dewpt_f: {quantity: dew_point, unit: degF}\n" +
				"              wind_mph: {quantity: wind, unit: mph}\n              solar_wm2: {quantity: solar, unit: W/m2}\n" +
				"              rain_in: {quantity: rain, unit: in}\n")
		case Glasshouse:
			station(Glasshouse, "fao56", 1.5)
			fmt.Fprintf(&b, "          - {id: air, topic: %q, format: json, quantity: air_temp, unit: degC, value_key: degC, time_key: t}\n", s.Topic(Glasshouse, "air"))
			fmt.Fprintf(&b, "          - id: pack\n            topic: %q\n            format: senml\n            records:\n", s.Topic(Glasshouse, "pack"))
			b.WriteString("              \"gh-a:rh\": {quantity: rel_humidity, unit: \"%\"}\n              \"gh-a:airflow\": {quantity: wind, unit: m/s}\n" +
				"              \"gh-a:sol\": {quantity: solar, unit: W/m2}\n")
		}
	}
	b.WriteString(zonesYAML(s.o.Stations))
	return b.String()
}

// Config parses ConfigYAML.
func (s *Sim) Config(o ConfigOptions) (*config.Config, error) {
	cfg, err := config.Parse([]byte(s.ConfigYAML(o)))
	if err != nil {
		return nil, fmt.Errorf("config: %w", err)
	}
	return cfg, nil
}

// WriteReadingsCSV writes the samples of the normal messages as a readings
// CSV for `etpulse replay` (time, station, quantity, value, unit; canonical
// units, values exactly as the gateway decodes them).
func WriteReadingsCSV(w io.Writer, msgs []Message) error {
	bw := bufio.NewWriter(w)
	bw.WriteString("time,station,quantity,value,unit\n")
	for _, m := range msgs {
		if m.Kind != Normal {
			continue
		}
		for _, tr := range m.Samples {
			s := tr.Sample
			fmt.Fprintf(bw, "%s,%s,%s,%s,%s\n", s.Time.UTC().Format(time.RFC3339Nano), tr.Station, s.Quantity,
				strconv.FormatFloat(s.Value, 'g', -1, 64), hourly.CanonicalUnit(s.Quantity))
		}
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("write readings csv: %w", err)
	}
	return nil
}
