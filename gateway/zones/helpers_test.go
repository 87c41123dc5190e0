package zones

import (
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
	"etpulse/hourly"
)

// testConfig is an invented farm, "Fernhill": drip zones on one
// well, each 1000 m2 at 6 mm/h (flow 100 L/min), efficiency 0.9, loam-like
// soil (TAW 130 mm, RAW 65 mm), explicit trigger 20 mm, window all day.
// Without ids the zones are row-a, row-b and row-c.
func testConfig(t testing.TB, ids ...string) *config.Config {
	t.Helper()
	if len(ids) == 0 {
		ids = []string{"row-a", "row-b", "row-c"}
	}
	zones := ""
	for _, id := range ids {
		zones += zoneYAML(id)
	}
	doc := `
broker: {url: 'tcp://127.0.0.1:1883', client_id: etpulse-fernhill}
sites:
- id: fernhill
  stations:
  - id: mast
    latitude: 38.5
    longitude: -121.7
    elevation_m: 20
    utc_offset_hours: -8
    sensors:
    - {id: t, topic: fernhill/mast/t, format: number, quantity: air_temp, unit: degC}
    - {id: rh, topic: fernhill/mast/rh, format: number, quantity: rel_humidity, unit: '%'}
    - {id: u, topic: fernhill/mast/u, format: number, quantity: wind, unit: m/s}
    - {id: rs, topic: fernhill/mast/rs, format: number, quantity: solar, unit: W/m2}
  sources:
  - {id: well, max_valves: 3}
  zones:
` + zones
	c, err := config.Parse([]byte(doc))
	require.NoError(t, err)
	return c
}

func zoneYAML(id string) string {
	return `  - id: ` + id + `
    station: mast
    source: well
    area_m2: 1000
    crop: {kc: 1.0}
    soil: {field_capacity: 0.25, wilting_point: 0.12, root_depth_m: 1.0, p: 0.5, trigger_mm: 20, initial_depletion_mm: 30}
    system: {type: drip, rate_mm_h: 6, efficiency: 0.9, min_minutes: 5, max_minutes: 240, max_minutes_per_day: 300}
    windows: ["00:00-24:00"]
`
}

var fernLoc = time.FixedZone("UTC-8", -8*3600)

// record is a complete station hour with the given reference ET and rain.
func record(start time.Time, et, rain float64) hourly.Record {
	return hourly.Record{
		Site: "fernhill", Station: "mast", Reference: hourly.Short,
		Start: start.UTC(), End: start.Add(time.Hour).UTC(), Complete: true,
		Inputs: hourly.Hour{AirTemp: 20, Wind2: 2},
		Stats:  map[hourly.Quantity]hourly.Stats{hourly.AirTemp: {Count: 60, Mean: 20}, hourly.Wind: {Count: 60, Mean: 2.5}},
		Rain:   rain,
		Result: &hourly.Result{Reference: hourly.Short, ET: et},
	}
}

// fixture is a state file, an outbox with local history and a service.
type fixture struct {
	db    *bbolt.DB
	out   *store.Outbox
	svc   *Service
	reg   *prometheus.Registry
	clock *fakeClock

	mu     sync.Mutex
	events []Event
}

type fakeClock struct {
	mu  sync.Mutex
	now time.Time
}

func (c *fakeClock) Now() time.Time { c.mu.Lock(); defer c.mu.Unlock(); return c.now }

func (c *fakeClock) set(t time.Time) { c.mu.Lock(); defer c.mu.Unlock(); c.now = t }

func newFixture(t testing.TB, cfg *config.Config, broker Broker, start time.Time) *fixture {
	t.Helper()
	db, err := state.Open(filepath.Join(t.TempDir(), "state.db"))
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	f := &fixture{db: db, clock: &fakeClock{now: start}, reg: prometheus.NewRegistry()}
	f.out, err = store.OpenOutbox(db, store.OutboxOptions{LocalOnly: true, Clock: f.clock.Now})
	require.NoError(t, err)
	f.svc, err = New(Options{Config: cfg, DB: db, MQTT: broker, Store: f.out, Registerer: f.reg, Clock: clock.Func(f.clock.Now),
		OnEvent: func(e Event) { f.mu.Lock(); f.events = append(f.events, e); f.mu.Unlock() }})
	require.NoError(t, err)
	return f
}

func (f *fixture) hour(t *testing.T, rec hourly.Record) {
	t.Helper()
	require.NoError(t, f.db.Update(func(tx *bbolt.Tx) error { return f.svc.HandleHour(tx, rec) }))
}

func (f *fixture) status(t *testing.T, zone string) ZoneStatus {
	t.Helper()
	all, err := f.svc.Status(f.clock.Now())
	require.NoError(t, err)
	for _, s := range all {
		if s.Zone == zone {
			return s
		}
	}
	t.Fatalf("no zone %s", zone)
	return ZoneStatus{}
}

func (f *fixture) eventsOf(kind EventKind) []Event {
	f.mu.Lock()
	defer f.mu.Unlock()
	var out []Event
	for _, e := range f.events {
		if e.Kind == kind {
			out = append(out, e)
		}
	}
	return out
}
