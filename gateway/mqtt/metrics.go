package mqtt

import (
	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway/internal/promreg"
)

type metrics struct {
	connected  prometheus.Gauge
	reconnects prometheus.Counter
	received   prometheus.Counter
	inflight   prometheus.Gauge
}

// newMetrics creates the client's metrics and registers them with reg (when
// not nil). A collector already registered under the same name (a second
// client in the same process) is shared.
func newMetrics(reg prometheus.Registerer) (*metrics, error) {
	m := &metrics{
		connected: prometheus.NewGauge(prometheus.GaugeOpts{
			Name: "etpulse_mqtt_connected",
			Help: "1 while the connection to the MQTT broker is up, else 0.",
		}),
		reconnects: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "etpulse_mqtt_reconnects_total",
			Help: "Connections to the MQTT broker made after the first one.",
		}),
		received: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "etpulse_mqtt_messages_received_total",
			Help: "MQTT messages received, before decoding.",
		}),
		inflight: prometheus.NewGauge(prometheus.GaugeOpts{
			Name: "etpulse_mqtt_inflight_messages",
			Help: "Received MQTT messages queued or being handled.",
		}),
	}
	var err error
	if m.connected, err = promreg.Shared(reg, "mqtt", m.connected); err != nil {
		return nil, err
	}
	if m.reconnects, err = promreg.Shared(reg, "mqtt", m.reconnects); err != nil {
		return nil, err
	}
	if m.received, err = promreg.Shared(reg, "mqtt", m.received); err != nil {
		return nil, err
	}
	if m.inflight, err = promreg.Shared(reg, "mqtt", m.inflight); err != nil {
		return nil, err
	}
	return m, nil
}
