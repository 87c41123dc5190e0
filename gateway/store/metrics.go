package store

import (
	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway/internal/promreg"
)

type outboxMetrics struct {
	quarantined prometheus.Counter
	dropped     *prometheus.CounterVec
}

func newOutboxMetrics(o *Outbox, reg prometheus.Registerer) (*outboxMetrics, error) {
	m := &outboxMetrics{
		quarantined: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "etpulse_outbox_quarantined_total",
			Help: "Points moved to the quarantine because they failed validation or the store refused them.",
		}),
		dropped: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_outbox_dropped_total",
			Help: "Points dropped from the outbox by the size cap, by class (only raw summaries are ever dropped).",
		}, []string{"class"}),
	}
	m.dropped.WithLabelValues(string(ClassRaw))
	cs := []prometheus.Collector{
		m.quarantined, m.dropped,
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{
			Name: "etpulse_outbox_depth",
			Help: "Points waiting in the outbox for the store.",
		}, func() float64 { d, _ := o.Stats(); return float64(d) }),
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{
			Name: "etpulse_outbox_oldest_age_seconds",
			Help: "How long the oldest point in the outbox has waited, 0 when empty.",
		}, func() float64 { _, a := o.Stats(); return a.Seconds() }),
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{
			Name: "etpulse_outbox_cap",
			Help: "Configured outbox size cap, in points.",
		}, func() float64 { return float64(o.opt.Cap) }),
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{
			Name: "etpulse_outbox_near_cap",
			Help: "1 when the outbox holds at least the near-cap fraction of its cap.",
		}, func() float64 {
			if o.NearCap() {
				return 1
			}
			return 0
		}),
	}
	if err := promreg.Register(reg, "outbox", cs...); err != nil {
		return nil, err
	}
	return m, nil
}

type writerMetrics struct {
	written  prometheus.Counter
	errors   prometheus.Counter
	duration prometheus.Histogram
}

func newWriterMetrics(reg prometheus.Registerer) (*writerMetrics, error) {
	m := &writerMetrics{
		written: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "etpulse_store_points_written_total",
			Help: "Points the store accepted.",
		}),
		errors: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "etpulse_store_write_errors_total",
			Help: "Writes to the store that failed (server unreachable, timing out or failing); points it refused are counted in etpulse_outbox_quarantined_total.",
		}),
		duration: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name:    "etpulse_store_write_duration_seconds",
			Help:    "Duration of write requests to the store.",
			Buckets: prometheus.ExponentialBuckets(0.001, 4, 8),
		}),
	}
	if err := promreg.Register(reg, "store writer", m.written, m.errors, m.duration); err != nil {
		return nil, err
	}
	return m, nil
}
