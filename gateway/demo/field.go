package demo

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
	"strconv"
	"sync"
	"time"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/zones"
)

// The field sensors of the invented farm beside its weather stations: a
// soil-moisture probe in the apple block, a flow meter on the creek pump's
// main with a leak during the wheat's first run, and the site's forecast
// feed with one wrong and one correct rain forecast (Options.Scripted
// makes the simulated weather agree with the script).
const (
	probeZone   = "apple-block-4"
	probeSensor = "sm30"
	probeDepthM = 0.3
	// probeEvery is how often the probe publishes.
	probeEvery = 15 * time.Minute
	// probeNoise is the probe's noise, % by volume (a field-calibrated
	// capacitance probe's repeatability: common practice, no source).
	probeNoise = 0.2
	meterID    = "creek-main"
	leakZone   = "wheat-east"
	// leakFactor: the flow during the leak is 40 % above the expected.
	leakFactor = 1.4
)

// forecastScript is one scripted forecast: issued at local hour Issue of
// the first day, rain RainMM per hour from local hour From to To of that
// day at probability Prob; Comes says whether the simulated weather
// brings it (Scripted forces it, or keeps that day's afternoon dry).
type forecastScript struct {
	Issue, From, To float64
	RainMM, Prob    float64
	Comes           bool
}

var forecasts = []forecastScript{
	{Issue: 7, From: 13, To: 15, RainMM: 8, Prob: 0.8, Comes: false},
	{Issue: 12, From: 22, To: 24, RainMM: 15, Prob: 0.9, Comes: true},
}

// scriptedRain is the first day's rain of a scripted run: the correct
// forecast's rain, nothing else (so the wrong forecast's afternoon is dry).
func scriptedRain() (start, hours, rate float64) {
	for _, f := range forecasts {
		if f.Comes {
			return f.From, f.To - f.From, f.RainMM
		}
	}
	return -1, 0, 0
}

// fieldMsg is one message of the field sensors.
type fieldMsg struct {
	Topic   string
	Payload []byte
	Reading bool // a station reading (counted by the gateway's intake)
}

// field publishes the probe, the meter and the forecast at each simulated
// minute. The probe follows the zone balance's depletion (from the zone
// events) plus noise drawn from the seed.
type field struct {
	start      time.Time
	prefix     string
	site       string
	probeTopic string
	meterTopic string
	fcTopic    string
	fcTheta    float64            // the probe's field capacity, m3/m3
	rootM      float64            // the probe zone's root depth
	flows      map[string]float64 // zone -> expected flow, L/min
	rng        *rand.Rand
	valves     *valves
	table      *Table

	mu        sync.Mutex
	depletion float64 // the probe zone's latest depletion, mm
	leakRun   string  // the command id of the leaking run, once seen
	leakSaid  bool
}

// newField returns the field sensors of cfg's farm, or nil when the farm
// has no zones. Its valves are set once they are served.
func newField(sim *Sim, cfg *config.Config, t *Table) (*field, error) {
	if !hasZones(cfg) {
		return nil, nil
	}
	s := &cfg.Sites[0]
	f := &field{start: sim.Start(), prefix: cfg.Prefix(), site: s.ID, flows: map[string]float64{}, table: t,
		rng:        rand.New(rand.NewPCG(sim.o.Seed, 16)),
		probeTopic: sim.Topic(Orchard, probeSensor), meterTopic: config.MeterTopic(cfg.Prefix(), s.ID, meterID),
		fcTopic: config.ForecastTopic(cfg.Prefix(), s.ID)}
	for i := range s.Zones {
		z := &s.Zones[i]
		cz, err := z.Controller(s.StationByID(z.Station))
		if err != nil {
			return nil, fmt.Errorf("field: %w", err)
		}
		f.flows[z.ID] = cz.Flow()
		if z.ID == probeZone {
			f.depletion = z.Soil.InitialDepletionMM
			f.rootM = cz.Soil.RootMax
		}
	}
	ret, _ := controllers.Texture("loam")
	f.fcTheta = ret.Theta(controllers.FieldCapacityKPa)
	return f, nil
}

// zoneEvent keeps the probe zone's depletion (gateway.Deps.OnZoneEvent).
func (f *field) zoneEvent(e zones.Event) {
	if f == nil || e.Zone != probeZone || e.Step == nil {
		return
	}
	f.mu.Lock()
	f.depletion = e.Step.Depletion
	f.mu.Unlock()
}

// messages returns the field's messages at the simulated minute at.
func (f *field) messages(at time.Time) []fieldMsg {
	var out []fieldMsg
	since := at.Sub(f.start)
	if since%probeEvery == 0 {
		f.mu.Lock()
		dep := f.depletion
		f.mu.Unlock()
		// One probe stands for the whole root zone: θ = θFC - Dr / (1000 Zr)
		// (FAO-56 eq. 82 turned round), plus noise.
		pct := 100*(f.fcTheta-dep/(1000*f.rootM)) + probeNoise*f.rng.NormFloat64()
		txt, _ := num(pct, 1)
		out = append(out, fieldMsg{Topic: f.probeTopic, Reading: true,
			Payload: []byte(`{"value":` + txt + `,"time":"` + at.UTC().Format(time.RFC3339) + `"}`)})
		if since == 0 {
			f.table.Event(at, "soil-moisture probe %s at %.1f m in %s publishes every %s: the balance's depletion as water content (loam field capacity %.1f %%) plus noise",
				probeSensor, probeDepthM, probeZone, probeEvery, 100*f.fcTheta)
		}
	}
	out = append(out, fieldMsg{Topic: f.meterTopic, Payload: f.meter(at)})
	for _, fc := range forecasts {
		if f.localHour(fc.Issue) == at {
			out = append(out, fieldMsg{Topic: f.fcTopic, Payload: f.forecast(fc)})
			comes := "the simulated weather brings none: a wrong forecast"
			if fc.Comes {
				comes = "the simulated weather brings it: a correct forecast"
			}
			f.table.Event(at, "forecast issued: %.0f mm rain from %s to %s at probability %.0f %% (%s)",
				fc.RainMM*(fc.To-fc.From), localTime(f.localHour(fc.From)), localTime(f.localHour(fc.To)), 100*fc.Prob, comes)
		}
	}
	return out
}

// localHour is hour h of the first simulated local day.
func (f *field) localHour(h float64) time.Time {
	return f.start.Add(time.Duration(h * float64(time.Hour)))
}

// meter is the flow through the creek pump's main at at: the expected flow
// of every valve running, 40 % more during the leaking run.
func (f *field) meter(at time.Time) []byte {
	running := f.valves.running()
	sort.Slice(running, func(i, j int) bool { return running[i].ID < running[j].ID })
	flow, expected, burst := 0.0, 0.0, ""
	for _, c := range running {
		q := f.flows[c.Zone]
		expected += q
		f.mu.Lock()
		if f.leakRun == "" && c.Zone == leakZone {
			f.leakRun = c.ID
		}
		leak := c.ID == f.leakRun
		if leak && !f.leakSaid {
			f.leakSaid, burst = true, c.Zone+"'s run "+c.ID
		}
		f.mu.Unlock()
		if leak {
			q *= leakFactor
		}
		flow += q
	}
	if burst != "" {
		f.table.Event(at, "flow meter %s: a lateral bursts during %s (its flow 40 %% above expected): %.0f L/min against %.0f expected",
			meterID, burst, flow, expected)
	}
	return []byte(`{"flow_l_min":` + strconv.FormatFloat(math.Round(flow*10)/10, 'f', 1, 64) + `}`)
}

// forecast is the payload of one scripted forecast.
func (f *field) forecast(fc forecastScript) []byte {
	b := []byte(`{"issued":"` + f.localHour(fc.Issue).UTC().Format(time.RFC3339) + `","periods":[`)
	for h := fc.From; h < fc.To; h++ {
		if h > fc.From {
			b = append(b, ',')
		}
		b = fmt.Appendf(b, `{"start":%q,"end":%q,"rain_mm":%g,"rain_probability":%g}`,
			f.localHour(h).UTC().Format(time.RFC3339), f.localHour(h+1).UTC().Format(time.RFC3339), fc.RainMM, fc.Prob)
	}
	return append(b, "]}"...)
}
