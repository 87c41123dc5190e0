package pipeline

import (
	"log/slog"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway/ingest"
	"etpulse/gateway/internal/promreg"
)

// metrics are the pipeline's Prometheus collectors.
type metrics struct {
	received   *prometheus.CounterVec // site, station
	rejected   *prometheus.CounterVec // site, station, reason
	duplicates *prometheus.CounterVec // site, station
	closed     *prometheus.CounterVec // site, station, complete
	revisions  *prometheus.CounterVec // site, station
	lastET     *prometheus.GaugeVec   // site, station, reference
	lastClosed *prometheus.GaugeVec   // site, station
	held       *prometheus.GaugeVec   // site, station
}

func newMetrics(reg prometheus.Registerer) (*metrics, error) {
	m := &metrics{
		received: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_messages_received_total",
			Help: "MQTT messages received, by site and station (both \"unknown\" when the topic matches no sensor).",
		}, []string{"site", "station"}),
		rejected: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_messages_rejected_total",
			Help: "Messages or readings that could not be used, by site, station and reason.",
		}, []string{"site", "station", "reason"}),
		duplicates: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_readings_duplicate_total",
			Help: "Readings dropped because the same sensor and timestamp were already stored (QoS 1 redelivery).",
		}, []string{"site", "station"}),
		closed: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_records_closed_total",
			Help: "Station hours closed (first emission), by completeness.",
		}, []string{"site", "station", "complete"}),
		revisions: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_hour_revisions_total",
			Help: "Hourly records re-emitted after a late reading.",
		}, []string{"site", "station"}),
		lastET: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_last_et_mm",
			Help: "Reference ET of the station's most recently closed complete hour, mm.",
		}, []string{"site", "station", "reference"}),
		lastClosed: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_last_hour_closed_timestamp_seconds",
			Help: "End of the station's most recently closed hour, Unix seconds.",
		}, []string{"site", "station"}),
		held: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_readings_held",
			Help: "Readings further ahead of the gateway clock than the station's max_future, held until the clock reaches them.",
		}, []string{"site", "station"}),
	}
	if err := promreg.Register(reg, "pipeline", m.received, m.rejected, m.duplicates, m.closed, m.revisions, m.lastET, m.lastClosed, m.held); err != nil {
		return nil, err
	}
	return m, nil
}

// labels returns the label values of a station-level series: site and
// station ("unknown" when empty: a topic no sensor uses), then more.
func labels(site, station string, more ...string) []string {
	return append([]string{stationLabel(site), stationLabel(station)}, more...)
}

// rejectLog logs rejected readings at a bounded rate: the first
// rejectLogBurst per reason in each minute, then one summary line per reason
// when the minute ends.
type rejectLog struct {
	mu         sync.Mutex
	log        *slog.Logger
	window     time.Time
	logged     map[ingest.Reason]int
	suppressed map[ingest.Reason]int
}

const rejectLogBurst = 5

func newRejectLog(l *slog.Logger) *rejectLog {
	return &rejectLog{log: l, logged: map[ingest.Reason]int{}, suppressed: map[ingest.Reason]int{}}
}

func (r *rejectLog) note(now time.Time, station string, rej ingest.Rejection) {
	r.mu.Lock()
	defer r.mu.Unlock()
	win := now.Truncate(time.Minute)
	if !win.Equal(r.window) {
		for reason, n := range r.suppressed {
			if n > 0 {
				r.log.Warn("rejected readings not logged", "reason", string(reason), "count", n, "minute", r.window)
			}
		}
		clear(r.logged)
		clear(r.suppressed)
		r.window = win
	}
	if r.logged[rej.Reason] >= rejectLogBurst {
		r.suppressed[rej.Reason]++
		return
	}
	r.logged[rej.Reason]++
	r.log.Warn("reading rejected", "site", stationLabel(rej.Site), "station", station, "sensor", rej.Sensor, "reason", string(rej.Reason), "err", rej.Err)
}
