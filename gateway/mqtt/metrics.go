package mqtt

import (
	"errors"
	"fmt"

	"github.com/prometheus/client_golang/prometheus"
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
	if reg == nil {
		return m, nil
	}
	var err error
	m.connected, err = register(reg, m.connected)
	if err != nil {
		return nil, err
	}
	m.reconnects, err = register(reg, m.reconnects)
	if err != nil {
		return nil, err
	}
	m.received, err = register(reg, m.received)
	if err != nil {
		return nil, err
	}
	m.inflight, err = register(reg, m.inflight)
	if err != nil {
		return nil, err
	}
	return m, nil
}

func register[C prometheus.Collector](reg prometheus.Registerer, c C) (C, error) {
	if err := reg.Register(c); err != nil {
		var are prometheus.AlreadyRegisteredError
		if errors.As(err, &are) {
			if existing, ok := are.ExistingCollector.(C); ok {
				return existing, nil
			}
		}
		return c, fmt.Errorf("register metrics: %w", err)
	}
	return c, nil
}
