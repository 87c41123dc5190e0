package pipeline

import (
	"path/filepath"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/ingest"
)

// twoSitesConfig is an invented farm of two sites that each have a station
// called "north": their series must not merge.
const twoSitesConfig = `
broker: {url: "tcp://127.0.0.1:1883", client_id: pipeline-two-sites}
sites:
  - id: larkspur
    stations:
      - id: north
        latitude: 36.6
        longitude: -120.4
        utc_offset_hours: -8
        close_grace: 2m
        late_window: 6h
        sensors:
          - {id: t, topic: lh/north/t, format: number, quantity: air_temp, unit: degC}
          - {id: rh, topic: lh/north/rh, format: number, quantity: rel_humidity, unit: "%"}
          - {id: u, topic: lh/north/u, format: number, quantity: wind, unit: m/s}
          - {id: rs, topic: lh/north/rs, format: number, quantity: solar, unit: W/m2}
  - id: wrenfield
    stations:
      - id: north
        latitude: 36.7
        longitude: -120.5
        utc_offset_hours: -8
        close_grace: 2m
        late_window: 6h
        sensors:
          - {id: t, topic: wf/north/t, format: number, quantity: air_temp, unit: degC}
          - {id: rh, topic: wf/north/rh, format: number, quantity: rel_humidity, unit: "%"}
          - {id: u, topic: wf/north/u, format: number, quantity: wind, unit: m/s}
          - {id: rs, topic: wf/north/rs, format: number, quantity: solar, unit: W/m2}
`

// series returns the value of every series of the named family, keyed by
// its labels rendered as "name=value,..." in the exposition's order.
func series(t *testing.T, g prometheus.Gatherer, name string) map[string]float64 {
	t.Helper()
	mfs, err := g.Gather()
	require.NoError(t, err)
	out := map[string]float64{}
	for _, mf := range mfs {
		if mf.GetName() != name {
			continue
		}
		for _, m := range mf.GetMetric() {
			k := ""
			for i, lp := range m.GetLabel() {
				if i > 0 {
					k += ","
				}
				k += lp.GetName() + "=" + lp.GetValue()
			}
			switch {
			case m.GetCounter() != nil:
				out[k] = m.GetCounter().GetValue()
			case m.GetGauge() != nil:
				out[k] = m.GetGauge().GetValue()
			}
		}
	}
	return out
}

// atSite returns the bench readings as readings of station "north" of site.
func atSite(site string, rds []ingest.Reading) []ingest.Reading {
	out := make([]ingest.Reading, len(rds))
	for i, r := range rds {
		r.Site, r.Station = site, "north"
		out[i] = r
	}
	return out
}

// Two sites with a station of the same id: every station-level series
// carries the site, and each site's series counts only its own messages.
func TestMetricsSeparateSitesWithSameStation(t *testing.T) {
	cfg, err := config.Parse([]byte(twoSitesConfig))
	require.NoError(t, err)
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	reg := prometheus.NewRegistry()
	p, err := New(cfg, Options{DB: db, Registerer: reg})
	require.NoError(t, err)

	// Each site: one hour every 5 min (48 readings); larkspur's first 3
	// are redelivered, wrenfield's first 1.
	lark := atSite("larkspur", benchReadings(h10, h10.Add(time.Hour), 5*time.Minute))
	wren := atSite("wrenfield", benchReadings(h10, h10.Add(time.Hour), 5*time.Minute))
	now := h10.Add(time.Hour)
	for _, batch := range [][]ingest.Reading{lark, wren, lark[:3], wren[:1]} {
		for _, r := range batch {
			p.CountMessage(r.Site, r.Station)
		}
		_, err := p.Ingest(now, batch)
		require.NoError(t, err)
	}
	p.Reject(now, "north", ingest.Rejection{Reason: ingest.ReasonUnparseable, Site: "wrenfield", Station: "north", Sensor: "t"})
	p.CountMessage("", "")
	_, err = p.Tick(now.Add(15 * time.Minute))
	require.NoError(t, err)

	assert.Equal(t, map[string]float64{
		"site=larkspur,station=north":  51,
		"site=wrenfield,station=north": 49,
		"site=unknown,station=unknown": 1,
	}, series(t, reg, "etpulse_messages_received_total"))
	assert.Equal(t, map[string]float64{
		"site=larkspur,station=north":  3,
		"site=wrenfield,station=north": 1,
	}, series(t, reg, "etpulse_readings_duplicate_total"))
	assert.Equal(t, map[string]float64{
		"reason=unparseable,site=wrenfield,station=north": 1,
	}, series(t, reg, "etpulse_messages_rejected_total"))
	assert.Equal(t, map[string]float64{
		"complete=true,site=larkspur,station=north":  1,
		"complete=true,site=wrenfield,station=north": 1,
	}, series(t, reg, "etpulse_records_closed_total"))
	closed := series(t, reg, "etpulse_last_hour_closed_timestamp_seconds")
	assert.Equal(t, map[string]float64{
		"site=larkspur,station=north":  float64(now.Unix()),
		"site=wrenfield,station=north": float64(now.Unix()),
	}, closed)
	et := series(t, reg, "etpulse_last_et_mm")
	assert.Len(t, et, 2)
	assert.Contains(t, et, "reference=short,site=larkspur,station=north")
	assert.Contains(t, et, "reference=short,site=wrenfield,station=north")
}
