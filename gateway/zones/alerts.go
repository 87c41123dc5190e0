package zones

import (
	"fmt"
	"math"
	"time"

	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/alert"
	"etpulse/gateway/store"
)

// zoneAlert is one zone alert to raise.
type zoneAlert struct {
	kind     alert.Kind
	severity alert.Severity
	message  string
	value    float64
	limit    float64
}

// raise raises a zone alert at now inside tx: through the alert.Raiser when one
// is configured, else (replay, backtest) as a store point as before.
func (s *Service) raise(tx *bbolt.Tx, site, zone string, a zoneAlert, now time.Time) error {
	if s.o.Alerts == nil {
		return s.enqueue(tx, alertPoint(site, zone, string(a.kind), true, now, a.message))
	}
	err := s.o.Alerts.Raise(tx, alert.Alert{
		Key: alert.ZoneKey(site, zone, a.kind), Severity: a.severity, Message: a.message,
		Value: finiteOr0(a.value), Limit: finiteOr0(a.limit), Since: now,
	})
	if err != nil {
		return fmt.Errorf("raise %s alert of zone %s: %w", a.kind, zone, err)
	}
	return nil
}

// clear clears a zone alert at now inside tx. Without an alert.Raiser only the
// stale-ET alert, whose state the zone record keeps, writes a store point
// (pointOnly); clearing an alert that is not active does nothing.
func (s *Service) clear(tx *bbolt.Tx, site, zone string, kind alert.Kind, now time.Time, message string, pointOnly bool) error {
	if s.o.Alerts == nil {
		if !pointOnly {
			return nil
		}
		return s.enqueue(tx, alertPoint(site, zone, string(kind), false, now, message))
	}
	if err := s.o.Alerts.Clear(tx, alert.ZoneKey(site, zone, kind), now, message); err != nil {
		return fmt.Errorf("clear %s alert of zone %s: %w", kind, zone, err)
	}
	return nil
}

// startedAt returns when this service started: its clock at New, or the
// earliest tick when ticks run before that (a backtest of past days).
func (s *Service) startedAt(now time.Time) time.Time {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.started.IsZero() || now.Before(s.started) {
		s.started = now
	}
	return s.started
}

// staleDue reports whether the stale-ET alert of a zone should be raised at
// now. A zone that never had valid ET waits for max_missing_hours after the
// service started before the alert is raised (a fresh start is not an
// outage); once raised, the alert stays until valid ET arrives. A zone whose
// state holds a valid ET goes stale max_missing_hours after that ET.
func (s *Service) staleDue(z *controllers.Zone, zr *zoneRecord, now time.Time) bool {
	if !z.Stale(&zr.State, now) {
		return false
	}
	if zr.StaleAlert || !zr.State.LastValid.IsZero() {
		return true
	}
	return now.Sub(s.startedAt(now)) > time.Duration(z.FailSafe.MaxMissingHours)*time.Hour
}

// staleAlert describes the stale-ET alert of a zone at now; started is when
// the service started, named when the zone never had valid ET.
func staleAlert(z *controllers.Zone, st *controllers.State, now, started time.Time) zoneAlert {
	a := zoneAlert{kind: alert.KindZoneETStale, severity: alert.SeverityCritical,
		limit: float64(z.FailSafe.MaxMissingHours)}
	if st.LastValid.IsZero() {
		a.value = math.Round(now.Sub(started).Hours()*10) / 10
		a.message = fmt.Sprintf("no valid ET since the gateway started %.1f h ago, limit %d h", a.value, z.FailSafe.MaxMissingHours)
	} else {
		a.value = math.Round(now.Sub(st.LastValid).Hours()*10) / 10
		a.message = fmt.Sprintf("no valid ET for %.1f h (since %s), limit %d h",
			a.value, st.LastValid.UTC().Format(time.RFC3339), z.FailSafe.MaxMissingHours)
	}
	if z.FailSafe.Fallback {
		a.message += "; using fallback ET"
		a.severity = alert.SeverityWarning
	} else {
		a.message += "; zone holds"
	}
	return a
}

// noReportAlert describes a command that expired without a final report.
func noReportAlert(c *controllers.Command, note string, p controllers.CommandPolicy) zoneAlert {
	a := zoneAlert{kind: alert.KindValveNoReport, severity: alert.SeverityCritical,
		message: fmt.Sprintf("command %s (%d min from %s): %s", c.ID, c.Minutes, c.Start.UTC().Format(time.RFC3339), note),
		value:   float64(c.Attempts), limit: float64(p.MaxAttempts)}
	if c.StopAttempts > 0 {
		a.value = float64(c.StopAttempts)
	}
	return a
}

// failedAlert describes a failed run report.
func failedAlert(c *controllers.Command, r controllers.Report) zoneAlert {
	return runEndAlert(alert.KindValveFailed, alert.SeverityCritical, "failed", "no reason given", c, r)
}

// runEndAlert describes a run that ended early: verb says how, the report
// gives the cause (or dflt) and the minutes run.
func runEndAlert(kind alert.Kind, sev alert.Severity, verb, dflt string, c *controllers.Command, r controllers.Report) zoneAlert {
	why := r.Reason
	if why == "" {
		why = dflt
	}
	return zoneAlert{kind: kind, severity: sev,
		message: fmt.Sprintf("command %s %s after %.1f of %d min: %s", c.ID, verb, c.MinutesRun, c.Minutes, why),
		value:   c.MinutesRun, limit: float64(c.Minutes)}
}

// valveOpenAlert describes a command whose valve may still be open: its
// run's latest possible end passed without a final report, or its stops go
// unanswered.
func valveOpenAlert(c *controllers.Command, reason string) zoneAlert {
	return zoneAlert{kind: alert.KindValveOpen, severity: alert.SeverityCritical,
		message: fmt.Sprintf("command %s (valve %s, %d min from %s): %s; stop %d sent, the zone waits for the controller's final report",
			c.ID, c.Valve, c.Minutes, c.Start.UTC().Format(time.RFC3339), reason, c.StopAttempts),
		value: float64(c.StopAttempts)}
}

// overrunAlert describes a report that claims more than the command.
func overrunAlert(c *controllers.Command, out controllers.Outcome) zoneAlert {
	return zoneAlert{kind: alert.KindValveOverrun, severity: alert.SeverityWarning,
		message: fmt.Sprintf("command %s: %s; credited %.2f mm", c.ID, out.Overrun, out.CreditMM),
		value:   c.MinutesRun, limit: float64(c.Minutes)}
}

// stoppedAlert describes a run the controller closed on its own.
func stoppedAlert(c *controllers.Command, r controllers.Report) zoneAlert {
	return runEndAlert(alert.KindValveStopped, alert.SeverityWarning, "stopped at the controller", "no cause given", c, r)
}

// clearAfterReport clears the valve alerts a final report answers: any
// final report shows the controller answers again (no report, valve open);
// a full run without overrun shows the valve works normally again (failed,
// stopped in the field, overrun).
func (s *Service) clearAfterReport(tx *bbolt.Tx, ref *zoneRef, c *controllers.Command, r controllers.Report, out controllers.Outcome, now time.Time) error {
	text := fmt.Sprintf("command %s reported %s", c.ID, r.State)
	kinds := []alert.Kind{alert.KindValveNoReport, alert.KindValveOpen}
	if r.State == controllers.ReportFinished && out.Overrun == "" {
		kinds = append(kinds, alert.KindValveFailed, alert.KindValveStopped, alert.KindValveOverrun)
	}
	for _, k := range kinds {
		if err := s.clear(tx, ref.site, ref.id, k, now, text, false); err != nil {
			return err
		}
	}
	return nil
}

func finiteOr0(v float64) float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0
	}
	return v
}

// alertPoint is the store point of a zone alert when no alert.Raiser is
// configured: measurement zone_alert with the text in notes.
func alertPoint(site, zone, kind string, raised bool, t time.Time, text string) store.Point {
	p := store.ZoneAlertPoint(site, zone, kind, t, map[string]any{"raised": raised})
	p.Notes = map[string]string{"text": text}
	return p
}
