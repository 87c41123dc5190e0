package demo

import (
	"context"
	"fmt"
	"log/slog"
	"strings"
	"time"

	"etpulse/controllers"
	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/zones"
)

// zonesYAML is the irrigation of the invented farm: a drip-watered apple
// block on the orchard mast (its records are tall-reference ETrs, so the Kc
// is alfalfa-based: about the grass Kc / 1.2, common practice, no source)
// and a sprinkler-watered wheat paddock on the paddock station. The blocks
// start a little dry so the first evening waters them.
func zonesYAML(stations []string) string {
	has := map[string]bool{}
	for _, s := range stations {
		has[s] = true
	}
	if !has[Orchard] || !has[Paddock] {
		return ""
	}
	return `    sources:
      - {id: creek-pump, max_valves: 2, max_flow_l_min: 3000}
    meters:
      - {id: creek-main, source: creek-pump, stop_on_high: true}
    zones:
      - id: apple-block-4
        station: orchard
        valve: v4
        source: creek-pump
        area_m2: 20000
        crop: {reference: alfalfa, kc: 0.8}
        soil: {available_water_mm_per_m: 110, root_depth_m: 0.8, p: 0.5, trigger_mm: 8, initial_depletion_mm: 4}
        effective_rain: {method: fraction_above_threshold, fraction: 0.8, threshold_mm: 0.5}
        system:
          type: drip
          drip: {emitter_l_h: 2, emitters_per_plant: 4, plant_area_m2: 6}
          efficiency: 0.9
          min_minutes: 15
          max_minutes: 180
          max_minutes_per_day: 240
        windows: ["20:00-06:00"]
        weather_holds: {frost_below_c: 1}
        probes:
          sensors: [{sensor: sm30, depth_m: 0.3}]
          texture: loam
        forecast: {rain_min_mm: 5, rain_min_probability: 0.7}
      - id: wheat-east
        station: paddock
        valve: v9
        source: creek-pump
        area_m2: 30000
        crop: {kc: 1.1}
        soil: {field_capacity: 0.25, wilting_point: 0.12, root_depth_m: 0.6, p: 0.55, trigger_mm: 20, refill_fraction_of_raw: 0.1, initial_depletion_mm: 16}
        effective_rain: {method: fraction_above_threshold, fraction: 0.8, threshold_mm: 0.5}
        system:
          type: sprinkler
          sprinkler: {nozzle_l_min: 12, spacing_along_m: 12, spacing_between_m: 12}
          efficiency: 0.75
          min_minutes: 10
          max_minutes: 120
          max_minutes_per_day: 180
          cycle_minutes: 40
          soak_minutes: 20
        windows: ["21:00-05:00"]
        weather_holds: {wind_max_m_s: 8, frost_below_c: 1}
`
}

func hasZones(cfg *config.Config) bool {
	for _, s := range cfg.Sites {
		if len(s.Zones) > 0 {
			return true
		}
	}
	return false
}

// serveValves connects the simulated valve controllers (valves), which
// the demo steps each simulated minute. The caller closes the returned
// client.
func serveValves(ctx context.Context, url string, cfg *config.Config, clk clock.Clock, tr *traffic, log *slog.Logger) (*mqtt.Client, *valves, error) {
	c, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: "etpulse-demo-valves", Workers: 1})
	if err != nil {
		return nil, nil, fmt.Errorf("valves: %w", err)
	}
	v := &valves{mqtt: tr.client("valves", c), clock: clk.Now, log: log}
	topics := map[string]string{}
	for _, s := range cfg.Sites {
		for i := range s.Zones {
			topics[s.Zones[i].CommandTopicIn(cfg.Prefix(), s.ID)] = s.Zones[i].ReportTopicIn(cfg.Prefix(), s.ID)
		}
	}
	if err := v.serve(topics); err != nil {
		c.Close(time.Second)
		return nil, nil, err
	}
	return c, v, nil
}

func zoneEvent(t *Table, e zones.Event) {
	c := e.Command
	switch e.Kind {
	case zones.EventSent:
		if c.Attempts == 1 {
			t.Event(e.Time, "valve command %s: %s %d min from %s (cycle %d/%d, depletion %.1f mm, trigger %.1f mm)",
				c.ID, c.Zone, c.Minutes, localTime(c.Start), c.Cycle, c.Cycles, c.Reason.DepletionMM, c.Reason.TriggerMM)
		} else {
			t.Event(e.Time, "valve command %s re-sent (attempt %d)", c.ID, c.Attempts)
		}
	case zones.EventCredited:
		t.Event(e.Time, "credited %s: %.1f mm net from %s, depletion now %.1f mm", c.Zone, e.Step.Irrigation, c.ID, e.Step.Depletion)
	case zones.EventExpired:
		t.Event(e.Time, "valve command %s expired: %s (not credited)", c.ID, e.Text)
	case zones.EventCancelled:
		t.Event(e.Time, "valve command %s cancelled: %s", c.ID, e.Text)
	case zones.EventStop:
		t.Event(e.Time, "valve stop for %s sent (attempt %d): %s", c.ID, c.StopAttempts, e.Text)
	case zones.EventReport:
		if c.State == controllers.Failed {
			t.Event(e.Time, "valve command %s failed: %s", c.ID, c.Note)
		}
	case zones.EventSkip:
		if strings.Contains(e.Text, "forecast") && t.firstForecastSkip(e.Zone, e.Time) {
			t.Event(e.Time, "zone %s not watered: %s", e.Zone, e.Text)
		}
	case zones.EventHold, zones.EventAlert:
		t.Event(e.Time, "zone %s: %s", e.Zone, e.Text)
	}
}
