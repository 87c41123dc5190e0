package zones

import (
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"etpulse/controllers"
	"etpulse/gateway/internal/promreg"
)

type metrics struct {
	depletion  *prometheus.GaugeVec
	taw        *prometheus.GaugeVec
	commands   *prometheus.CounterVec
	badReports prometheus.Counter
}

func newMetrics(reg prometheus.Registerer) (*metrics, error) {
	m := &metrics{
		depletion: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_zone_depletion_mm",
			Help: "Root-zone depletion Dr of the zone, mm below field capacity.",
		}, []string{"site", "zone"}),
		taw: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_zone_taw_mm",
			Help: "Total available water of the zone's root zone (FAO-56 eq. 82), mm.",
		}, []string{"site", "zone"}),
		commands: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_commands_total",
			Help: "Valve commands by outcome: sent, resent, reported (finished), failed, expired, cancelled, duplicate (report), stop_sent, stop_resent, stopped (report).",
		}, []string{"site", "zone", "outcome"}),
		badReports: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "etpulse_valve_reports_refused_total",
			Help: "Valve reports that were malformed, for an unknown command, or contradicted the ledger.",
		}),
	}
	if err := promreg.Register(reg, "zone", m.depletion, m.taw, m.commands, m.badReports); err != nil {
		return nil, err
	}
	return m, nil
}

func (m *metrics) setLevels(ref *zoneRef, st *controllers.State, t time.Time) {
	m.depletion.WithLabelValues(ref.site, ref.id).Set(st.Depletion)
	m.taw.WithLabelValues(ref.site, ref.id).Set(ref.z.LevelsAt(st, t).TAW)
}

func (m *metrics) command(site, zone, outcome string) {
	m.commands.WithLabelValues(site, zone, outcome).Inc()
}
