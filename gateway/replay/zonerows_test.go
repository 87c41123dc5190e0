package replay

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/hourly"
)

// feedLog records what the replay feeds the zones, in order.
type feedLog struct{ calls []string }

func (f *feedLog) ObserveSample(site, station string, s hourly.Sample, _ time.Time) {
	if s.Quantity == hourly.SoilWater || s.Quantity == hourly.SoilTension {
		f.calls = append(f.calls, fmt.Sprintf("probe %s/%s %s %s %g", site, station, s.Sensor, s.Time.Format(time.RFC3339), s.Value))
	}
}

func (f *feedLog) Meter(site, meter string, v float64, isFlow bool, at time.Time) error {
	f.calls = append(f.calls, fmt.Sprintf("meter %s/%s %g %v %s", site, meter, v, isFlow, at.Format(time.RFC3339)))
	return nil
}

func (f *feedLog) Forecast(site string, fc *controllers.Forecast, at time.Time) error {
	f.calls = append(f.calls, fmt.Sprintf("forecast %s %d periods %s", site, len(fc.Periods), at.Format(time.RFC3339)))
	return nil
}

// TestReplayZoneRows: probe, meter and forecast rows reach the zones in
// the order of the file; bad ones are reported with their line and the fix
// and do not stop the replay.
func TestReplayZoneRows(t *testing.T) {
	cfg, err := config.Load(filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml"))
	require.NoError(t, err)
	st := cfg.Sites[0].StationByID("mast")
	st.Sensors = append(st.Sensors, config.Sensor{ID: "sm50", Topic: "brackenby/mast/sm50", Format: config.FormatNumber,
		Channel: config.Channel{Quantity: hourly.SoilWater, Unit: "%"}})
	cfg.Sites[0].Meters = []config.Meter{{ID: "pear-meter", Zone: "pear-block-2"}, {ID: "pulser", Source: "river-pump", LitresPerPulse: 10}}

	in := strings.Join([]string{
		"time,station,quantity,value,unit,sensor",
		"2026-07-01T10:00:00Z,mast,air_temp,20,degC,",
		"2026-07-01T10:05:00Z,mast,soil_water,15,%,sm50",
		"2026-07-01T10:06:00Z,pear-meter,meter_flow,120,L/min,",
		"2026-07-01T10:07:00Z,brackenby/pear-meter,meter_total,1.5,m3,",
		"2026-07-01T10:08:00Z,pulser,meter_pulses,7,pulses,",
		`2026-07-01T10:09:00Z,brackenby,forecast,"{""issued"":""2026-07-01T09:00:00Z"",""periods"":[{""start"":""2026-07-02T00:00:00Z"",""end"":""2026-07-02T06:00:00Z"",""rain_mm"":12}]}",,`,
		"2026-07-01T10:10:00Z,no-meter,meter_flow,1,L/min,",
		"2026-07-01T10:11:00Z,pear-meter,meter_flow,-3,L/min,",
		"2026-07-01T10:12:00Z,pear-meter,meter_flow,3,gal/min,",
		"2026-07-01T10:13:00Z,pear-meter,meter_pulses,3,pulses,",
		`2026-07-01T10:14:00Z,brackenby,forecast,{not json},,`,
		"2026-07-01T10:15:00Z,nowhere,forecast,{},,",
		"2026-07-01T10:16:00Z,mast,air_temp,21,degC,",
	}, "\n") + "\n"
	feed := &feedLog{}
	var rowErrs bytes.Buffer
	sum, err := Run(context.Background(), cfg, strings.NewReader(in), io.Discard, Options{RowErrors: &rowErrs, Zones: feed})
	require.NoError(t, err)
	assert.Equal(t, []string{
		"probe brackenby/mast sm50 2026-07-01T10:05:00Z 15",
		"meter brackenby/pear-meter 120 true 2026-07-01T10:06:00Z",
		"meter brackenby/pear-meter 1500 false 2026-07-01T10:07:00Z",
		"meter brackenby/pulser 70 false 2026-07-01T10:08:00Z",
		"forecast brackenby 1 periods 2026-07-01T10:09:00Z",
	}, feed.calls)
	errs := rowErrs.String()
	t.Log("\n" + errs)
	assert.Equal(t, 6, sum.BadRows)
	assert.Contains(t, errs, `line 8: station: meter "no-meter" is not in the configuration (meters: pear-meter, pulser; use site/meter when ids repeat)`)
	assert.Contains(t, errs, `line 9: meter_flow: value -3 must be >= 0`)
	assert.Contains(t, errs, `line 10: meter_flow: unit "gal/min" is not one of [L/min m3/h]`)
	assert.Contains(t, errs, `line 11: meter_pulses: meter "pear-meter" has no litres_per_pulse in the configuration; set it or give meter_total in L`)
	assert.Contains(t, errs, `line 12: forecast: decode forecast:`)
	assert.Contains(t, errs, `line 13: station: forecast site "nowhere" is not in the configuration`)
	assert.Equal(t, 3, sum.Accepted, "the station rows (two air temperatures, the probe) went on")
}

// TestReplayZoneRowsWithoutZones: meter and forecast rows in a replay
// without zones are bad rows that say so.
func TestReplayZoneRowsWithoutZones(t *testing.T) {
	cfg, err := config.Load(filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml"))
	require.NoError(t, err)
	cfg.Sites[0].Meters = []config.Meter{{ID: "pear-meter", Zone: "pear-block-2"}}
	in := "time,station,quantity,value,unit\n2026-07-01T10:06:00Z,pear-meter,meter_flow,120,L/min\n"
	var rowErrs bytes.Buffer
	sum, err := Run(context.Background(), cfg, strings.NewReader(in), io.Discard, Options{RowErrors: &rowErrs})
	require.NoError(t, err)
	assert.Equal(t, 1, sum.BadRows)
	assert.Contains(t, rowErrs.String(), "line 2: meter_flow: rows for the zones need a zone backtest (etpulse replay with zones in the configuration); skipped")
}
