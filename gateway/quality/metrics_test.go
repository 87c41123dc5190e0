package quality

import (
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/alert"
	"etpulse/gateway/config"
)

// series renders every series of the named family as
// "label=value,...: value" with labels in the exposition's (sorted) order.
func series(t *testing.T, g prometheus.Gatherer, name string) []string {
	t.Helper()
	mfs, err := g.Gather()
	require.NoError(t, err)
	var out []string
	for _, mf := range mfs {
		if mf.GetName() != name {
			continue
		}
		for _, m := range mf.GetMetric() {
			var ls []string
			for _, lp := range m.GetLabel() {
				ls = append(ls, lp.GetName()+"="+lp.GetValue())
			}
			v := m.GetGauge().GetValue()
			if c := m.GetCounter(); c != nil {
				v = c.GetValue()
			}
			out = append(out, strings.Join(ls, ",")+": "+strconv.FormatFloat(v, 'g', -1, 64))
		}
	}
	sort.Strings(out)
	return out
}

// An alert rule can say which sensor is at fault: one active-alert series
// per alert, named by site, station or zone, sensor, quantity, kind and
// severity; gone when the alert clears; back after a restart; and a counter
// of raised alerts by site, kind and severity.
func TestAlertMetricsNameTheSensor(t *testing.T) {
	path := filepath.Join(t.TempDir(), "m.db")
	f := newFixture(t, testConfig(config.RespondKeep), path, t0)
	solar := alert.Key{Site: "brackenfold", Station: "orchard", Sensor: "p1", Quantity: "solar", Kind: alert.KindSolarLow}
	temp := alert.Key{Site: "brackenfold", Station: "orchard", Sensor: "t1", Quantity: "air_temp", Kind: alert.KindRange}
	valve := alert.ZoneKey("brackenfold", "row-c", alert.KindValveNoReport)
	require.NoError(t, f.mon.Raise(nil, alert.Alert{Key: solar, Severity: alert.SeverityCritical, Message: "low", Since: t0}))
	require.NoError(t, f.mon.Raise(nil, alert.Alert{Key: temp, Message: "out of range", Since: t0}))
	require.NoError(t, f.mon.Raise(nil, alert.Alert{Key: valve, Severity: alert.SeverityCritical, Message: "no report", Since: t0}))

	assert.Equal(t, []string{
		"kind=range,quantity=air_temp,sensor=t1,severity=warning,site=brackenfold,station=orchard,zone=: 1",
		"kind=solar-low,quantity=solar,sensor=p1,severity=critical,site=brackenfold,station=orchard,zone=: 1",
		"kind=valve-no-report,quantity=valve,sensor=,severity=critical,site=brackenfold,station=,zone=row-c: 1",
	}, series(t, f.reg, "etpulse_alerts_active"))
	assert.Equal(t, []string{
		"kind=range,severity=warning,site=brackenfold: 1",
		"kind=solar-low,severity=critical,site=brackenfold: 1",
		"kind=valve-no-report,severity=critical,site=brackenfold: 1",
	}, series(t, f.reg, "etpulse_alerts_raised_total"))

	// Cleared: its series is deleted, not left at 0.
	require.NoError(t, f.mon.Clear(nil, temp, t0.Add(time.Hour), "in range again"))
	assert.Equal(t, []string{
		"kind=solar-low,quantity=solar,sensor=p1,severity=critical,site=brackenfold,station=orchard,zone=: 1",
		"kind=valve-no-report,quantity=valve,sensor=,severity=critical,site=brackenfold,station=,zone=row-c: 1",
	}, series(t, f.reg, "etpulse_alerts_active"))
	assert.Equal(t, []string{"kind=range,severity=warning,site=brackenfold: 1"}, series(t, f.reg, "etpulse_alerts_cleared_total"))

	// After a restart the active alerts are series again; nothing was raised.
	require.NoError(t, f.db.Close())
	f2 := newFixture(t, testConfig(config.RespondKeep), path, t0.Add(2*time.Hour))
	assert.Equal(t, []string{
		"kind=solar-low,quantity=solar,sensor=p1,severity=critical,site=brackenfold,station=orchard,zone=: 1",
		"kind=valve-no-report,quantity=valve,sensor=,severity=critical,site=brackenfold,station=,zone=row-c: 1",
	}, series(t, f2.reg, "etpulse_alerts_active"))
	assert.Empty(t, series(t, f2.reg, "etpulse_alerts_raised_total"))
}

// kindTotal sums the series of the named family whose kind is kind.
func kindTotal(t *testing.T, g prometheus.Gatherer, name, kind string) float64 {
	t.Helper()
	mfs, err := g.Gather()
	require.NoError(t, err)
	var sum float64
	for _, mf := range mfs {
		if mf.GetName() != name {
			continue
		}
		for _, m := range mf.GetMetric() {
			for _, lp := range m.GetLabel() {
				if lp.GetName() == "kind" && lp.GetValue() == kind {
					sum += m.GetGauge().GetValue() + m.GetCounter().GetValue()
				}
			}
		}
	}
	return sum
}
