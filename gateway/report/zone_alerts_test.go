package report

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/store"
)

// TestZoneDayAlertsFromZoneAlert: a zone's faults come from zone_alert
// only; opening a file of schema version 2 moves the old sensor_alert form
// (station "zones", the zone as sensor) there (gateway/state migrate2to3),
// so a point of the old form is not read. The texts are placeholders.
func TestZoneDayAlertsFromZoneAlert(t *testing.T) {
	day := time.Date(2026, 2, 3, 0, 0, 0, 0, time.UTC)
	at := day.Add(5 * time.Hour)
	fields := map[string]any{"active": true, "critical": true}
	notes := map[string]string{"event": "raised", "severity": "critical", "message": "valve v7 sent no report"}
	pts := []store.Point{
		{Class: store.ClassAlert, Measurement: store.MeasurementZoneAlert, Time: at, Fields: fields, Notes: notes,
			Tags: map[string]string{"site": "wattlegrove", "zone": "citrus-3", "quantity": "valve", "kind": "valve-no-report"}},
		{Class: store.ClassAlert, Measurement: store.MeasurementAlert, Time: at.Add(time.Hour), Fields: fields, Notes: notes,
			Tags: map[string]string{"site": "wattlegrove", "station": "zones", "sensor": "citrus-3", "quantity": "valve", "kind": "valve-failed"}},
	}
	rng := func(f store.Filter, fn func(store.Point) error) error {
		for _, p := range pts {
			in := !p.Time.Before(f.From) && (f.To.IsZero() || p.Time.Before(f.To))
			want := len(f.Measurements) == 0
			for _, m := range f.Measurements {
				want = want || m == p.Measurement
			}
			if in && want {
				if err := fn(p); err != nil {
					return err
				}
			}
		}
		return nil
	}
	z, err := zoneDay(rng, "wattlegrove", &config.Zone{ID: "citrus-3", Station: "ridge"}, 0, day)
	require.NoError(t, err)
	require.Len(t, z.Alerts, 1)
	assert.Equal(t, "valve-no-report", z.Alerts[0].Kind)
	assert.Equal(t, at, z.Alerts[0].Time)
}
