package replay

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/zones"
)

// ZoneFeed takes what the zones see live besides closed hours: every
// accepted station reading (a soil-moisture probe's among them), flow
// meter readings and forecasts. Meter and Forecast are called in the order
// of the file, after the station rows before them have gone through the
// pipeline; an error they return stops the replay.
type ZoneFeed interface {
	pipeline.SampleObserver
	// Meter is a reading of a site's meter at at: a flow rate in L/min
	// (isFlow) or a running volume in litres.
	Meter(site, meter string, v float64, isFlow bool, at time.Time) error
	// Forecast is a forecast of site arriving at at.
	Forecast(site string, f *controllers.Forecast, at time.Time) error
}

// The quantities of the rows for the zones. A meter row names the meter in
// the station column (id, or site/id when ids repeat); a forecast row names
// the site there and carries the forecast topic's JSON payload as its value.
const (
	qMeterFlow   = "meter_flow"
	qMeterTotal  = "meter_total"
	qMeterPulses = "meter_pulses"
	qForecast    = "forecast"
)

// meterUnits converts a meter row's unit to L/min (flow) or litres (total).
var meterUnits = map[string]map[string]float64{
	qMeterFlow:  {"L/min": 1, "m3/h": 1000.0 / 60},
	qMeterTotal: {"L": 1, "m3": 1000},
}

// zoneRow is a row for the zones rather than the pipeline.
type zoneRow struct {
	site, meter string
	v           float64
	isFlow      bool
	forecast    *controllers.Forecast
	at          time.Time
}

type meterRef struct {
	site, id       string
	litresPerPulse float64
}

// indexMeters lists the configured meters by id (when unique) and
// site/id.
func (rr *rowReader) indexMeters(cfg *config.Config) {
	rr.meters, rr.sites = map[string]meterRef{}, map[string]bool{}
	count := map[string]int{}
	for _, site := range cfg.Sites {
		rr.sites[site.ID] = true
		for _, m := range site.Meters {
			count[m.ID]++
			rr.meters[site.ID+"/"+m.ID] = meterRef{site.ID, m.ID, m.LitresPerPulse}
		}
	}
	for _, site := range cfg.Sites {
		for _, m := range site.Meters {
			if count[m.ID] == 1 {
				rr.meters[m.ID] = meterRef{site.ID, m.ID, m.LitresPerPulse}
			}
			rr.meterIDs = append(rr.meterIDs, m.ID)
		}
	}
	sort.Strings(rr.meterIDs)
}

// isZoneQuantity tells the rows for the zones apart.
func isZoneQuantity(q string) bool {
	return q == qMeterFlow || q == qMeterTotal || q == qMeterPulses || q == qForecast
}

// zoneRow decodes a meter or forecast row; get reads a column.
func (rr *rowReader) zoneRow(q string, at time.Time, get func(string) string) (*zoneRow, error) {
	if q == qForecast {
		site := get("station")
		if !rr.sites[site] {
			return nil, fmt.Errorf("station: forecast site %q is not in the configuration (a forecast row names its site in the station column)", site)
		}
		f, err := zones.DecodeForecast([]byte(get("value")))
		if err != nil {
			return nil, fmt.Errorf("forecast: %w (the value is the forecast topic's JSON payload, quoted as CSV: doubled quotes inside)", err)
		}
		return &zoneRow{site: site, forecast: f, at: at}, nil
	}
	m, ok := rr.meters[get("station")]
	if !ok {
		return nil, fmt.Errorf("station: meter %q is not in the configuration (meters: %s; use site/meter when ids repeat)", get("station"), strings.Join(rr.meterIDs, ", "))
	}
	raw, err := strconv.ParseFloat(get("value"), 64)
	if err != nil || math.IsNaN(raw) || math.IsInf(raw, 0) {
		return nil, fmt.Errorf("%s: value %q is not a finite number", q, get("value"))
	}
	if raw < 0 {
		return nil, fmt.Errorf("%s: value %g must be >= 0", q, raw)
	}
	unit := get("unit")
	if q == qMeterPulses {
		if m.litresPerPulse <= 0 {
			return nil, fmt.Errorf("%s: meter %q has no litres_per_pulse in the configuration; set it or give meter_total in L", q, m.id)
		}
		if unit != "" && unit != "pulses" {
			return nil, fmt.Errorf("%s: unit %q is not pulses", q, unit)
		}
		return &zoneRow{site: m.site, meter: m.id, v: raw * m.litresPerPulse, at: at}, nil
	}
	factor, ok := meterUnits[q][unit]
	if !ok {
		units := make([]string, 0, 2)
		for u := range meterUnits[q] {
			units = append(units, u)
		}
		sort.Strings(units)
		return nil, fmt.Errorf("%s: unit %q is not one of %v", q, unit, units)
	}
	return &zoneRow{site: m.site, meter: m.id, v: raw * factor, isFlow: q == qMeterFlow, at: at}, nil
}

// feed passes a zone row to the zones.
func (z *zoneRow) feed(f ZoneFeed) error {
	if z.forecast != nil {
		return f.Forecast(z.site, z.forecast, z.at)
	}
	return f.Meter(z.site, z.meter, z.v, z.isFlow, z.at)
}
