package quality

import (
	"slices"
	"sync"

	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway/alert"
	"etpulse/gateway/internal/promreg"
)

// metrics are the monitor's Prometheus metrics. The active-alert gauge has
// one series per active alert (value 1), deleted when the alert clears, so
// its cardinality is bounded by the alerts active at once.
type metrics struct {
	active        *prometheus.GaugeVec   // site, station, zone, sensor, quantity, kind, severity
	raised        *prometheus.CounterVec // site, kind, severity
	cleared       *prometheus.CounterVec // site, kind, severity
	publishErrors prometheus.Counter

	mu    sync.Mutex
	shown map[alert.Key][]string // label values of each active alert's series
}

func newMetrics(reg prometheus.Registerer) (*metrics, error) {
	m := &metrics{
		active: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_alerts_active",
			Help: "1 for each active alert, by site, station (empty for a zone alert) or zone, sensor, quantity, kind of check and severity; the series is removed when the alert clears.",
		}, []string{"site", "station", "zone", "sensor", "quantity", "kind", "severity"}),
		raised: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_alerts_raised_total",
			Help: "Alerts raised, by site, kind of check and severity.",
		}, []string{"site", "kind", "severity"}),
		cleared: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_alerts_cleared_total",
			Help: "Alerts cleared, by site, kind of check and severity.",
		}, []string{"site", "kind", "severity"}),
		publishErrors: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "etpulse_alert_publish_errors_total",
			Help: "Failed attempts to publish an alert message on MQTT.",
		}),
		shown: map[alert.Key][]string{},
	}
	if err := promreg.Register(reg, "alert", m.active, m.raised, m.cleared, m.publishErrors); err != nil {
		return nil, err
	}
	return m, nil
}

// activeLabels returns the label values of a's active-alert series: a zone
// alert names its zone and no station or sensor (its key's sensor is the
// zone id).
func activeLabels(a alert.Alert) []string {
	station, zone, sensor := a.Station, "", a.Sensor
	if z := a.Zone(); z != "" {
		station, zone, sensor = "", z, ""
	}
	return []string{a.Site, station, zone, sensor, string(a.Quantity), string(a.Kind), string(a.Severity)}
}

// show sets a's active-alert series to 1, replacing the series it had under
// another severity.
func (m *metrics) show(a alert.Alert) {
	ls := activeLabels(a)
	m.mu.Lock()
	defer m.mu.Unlock()
	if old, ok := m.shown[a.Key]; ok && !slices.Equal(old, ls) {
		m.active.DeleteLabelValues(old...)
	}
	m.shown[a.Key] = ls
	m.active.WithLabelValues(ls...).Set(1)
}

// hide deletes the active-alert series of the alert with key k.
func (m *metrics) hide(k alert.Key) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if old, ok := m.shown[k]; ok {
		m.active.DeleteLabelValues(old...)
		delete(m.shown, k)
	}
}

// event counts ev and shows or hides its alert's series.
func (m *metrics) event(ev Event) {
	a := ev.Alert
	switch ev.Type {
	case EventRaised:
		m.raised.WithLabelValues(a.Site, string(a.Kind), string(a.Severity)).Inc()
		m.show(a)
	case EventUpdated:
		m.show(a)
	case EventCleared:
		m.cleared.WithLabelValues(a.Site, string(a.Kind), string(a.Severity)).Inc()
		m.hide(a.Key)
	}
}
