package quality

import (
	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway/internal/promreg"
)

// metrics are the monitor's Prometheus metrics.
type metrics struct {
	active        *prometheus.GaugeVec
	raised        *prometheus.CounterVec
	cleared       *prometheus.CounterVec
	publishErrors prometheus.Counter
}

func newMetrics(reg prometheus.Registerer) (*metrics, error) {
	m := &metrics{
		active: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_alerts_active",
			Help: "Alerts currently active, by kind of check.",
		}, []string{"kind"}),
		raised: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_alerts_raised_total",
			Help: "Alerts raised, by kind of check.",
		}, []string{"kind"}),
		cleared: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_alerts_cleared_total",
			Help: "Alerts cleared, by kind of check.",
		}, []string{"kind"}),
		publishErrors: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "etpulse_alert_publish_errors_total",
			Help: "Failed attempts to publish an alert message on MQTT.",
		}),
	}
	if err := promreg.Register(reg, "alert", m.active, m.raised, m.cleared, m.publishErrors); err != nil {
		return nil, err
	}
	return m, nil
}
