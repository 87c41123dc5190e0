package zones

import (
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/internal/promreg"
)

// metrics are the zone service's Prometheus metrics: levels set when the
// balance changes, commands counted as they happen, and the day's runtime
// and holds read from the state file at each scrape (dayCollector).
type metrics struct {
	depletion  *prometheus.GaugeVec
	taw        *prometheus.GaugeVec
	raw        *prometheus.GaugeVec
	trigger    *prometheus.GaugeVec
	commands   *prometheus.CounterVec
	badReports *prometheus.CounterVec
}

func newMetrics(reg prometheus.Registerer, s *Service) (*metrics, error) {
	m := &metrics{
		depletion: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_zone_depletion_mm",
			Help: "Root-zone depletion Dr of the zone, mm below field capacity.",
		}, []string{"site", "zone"}),
		taw: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_zone_taw_mm",
			Help: "Total available water of the zone's root zone (FAO-56 eq. 82), mm.",
		}, []string{"site", "zone"}),
		raw: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_zone_raw_mm",
			Help: "Readily available water of the zone's root zone (FAO-56 eq. 83), mm.",
		}, []string{"site", "zone"}),
		trigger: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "etpulse_zone_trigger_mm",
			Help: "Depletion at which the zone is irrigated (trigger_mm, or RAW), mm.",
		}, []string{"site", "zone"}),
		commands: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_commands_total",
			Help: "Valve commands by outcome: sent, resent, reported (finished), failed, expired, cancelled, duplicate (report), stop_sent, stop_resent, stopped (report).",
		}, []string{"site", "zone", "outcome"}),
		badReports: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "etpulse_valve_reports_refused_total",
			Help: "Valve reports that were malformed, for an unknown command, or contradicted the ledger, by the site and zone of their topic.",
		}, []string{"site", "zone"}),
	}
	day := &dayCollector{
		s: s,
		hold: prometheus.NewDesc("etpulse_zone_hold",
			"1 while a manual hold or rain delay (of the zone or its whole site) is in force, else 0.", []string{"site", "zone"}, nil),
		runtime: prometheus.NewDesc("etpulse_zone_runtime_today_seconds",
			"Valve runtime charged against the zone's daily cap on its standard-time day so far (planned and sent commands in full, failed or stopped ones as reported), seconds.", []string{"site", "zone"}, nil),
		cap: prometheus.NewDesc("etpulse_zone_runtime_cap_seconds",
			"The zone's daily runtime cap (max_minutes_per_day), seconds.", []string{"site", "zone"}, nil),
	}
	if err := promreg.Register(reg, "zone", m.depletion, m.taw, m.raw, m.trigger, m.commands, m.badReports, day); err != nil {
		return nil, err
	}
	return m, nil
}

func (m *metrics) setLevels(ref *zoneRef, st *controllers.State, t time.Time) {
	m.depletion.WithLabelValues(ref.site, ref.id).Set(st.Depletion)
	l := ref.z.LevelsAt(st, t)
	m.taw.WithLabelValues(ref.site, ref.id).Set(l.TAW)
	m.raw.WithLabelValues(ref.site, ref.id).Set(l.RAW)
	m.trigger.WithLabelValues(ref.site, ref.id).Set(l.Trigger)
}

func (m *metrics) command(site, zone, outcome string) {
	m.commands.WithLabelValues(site, zone, outcome).Inc()
}

// dayCollector reads each zone's hold and the runtime charged today from
// the state file when scraped: both change with the clock alone (a rain
// delay ends, a day begins), not only when the service writes.
type dayCollector struct {
	s                  *Service
	hold, runtime, cap *prometheus.Desc
}

// Describe sends the descriptors of the collector's series.
func (c *dayCollector) Describe(ch chan<- *prometheus.Desc) {
	ch <- c.hold
	ch <- c.runtime
	ch <- c.cap
}

// Collect sends one hold, runtime and cap series per zone at the service
// clock's now. A state file that cannot be read is logged and leaves the
// series out.
func (c *dayCollector) Collect(ch chan<- prometheus.Metric) {
	now := c.s.o.Clock.Now()
	var out []prometheus.Metric
	err := c.s.o.DB.View(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		for _, site := range c.s.sites {
			ledger, err := loadLedger(b, site.id)
			if err != nil {
				return err
			}
			holds, err := loadHolds(b, site.id)
			if err != nil {
				return err
			}
			for _, ref := range site.zones {
				held := 0.0
				if _, ok := holds.For(ref.id, now); ok {
					held = 1
				}
				out = append(out,
					prometheus.MustNewConstMetric(c.hold, prometheus.GaugeValue, held, site.id, ref.id),
					prometheus.MustNewConstMetric(c.runtime, prometheus.GaugeValue, float64(ref.z.ChargedOn(ledger, now))*60, site.id, ref.id),
					prometheus.MustNewConstMetric(c.cap, prometheus.GaugeValue, float64(ref.z.System.MaxPerDay)*60, site.id, ref.id))
			}
		}
		return nil
	})
	if err != nil {
		c.s.log.Warn("zone metrics not collected", "err", err)
		return
	}
	for _, m := range out {
		ch <- m
	}
}
