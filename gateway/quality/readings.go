package quality

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"etpulse/gateway/alert"
	"etpulse/gateway/config"
	"etpulse/gateway/internal/precision"
	"etpulse/hourly"
)

// Reading-level timing rules (common practice, no source).
const (
	// spikeMaxGap: two readings further apart than this are not compared
	// for a spike (a gap is not a jump).
	spikeMaxGap = 15 * time.Minute
	// pairWindow: a dew point and an air temperature reading are compared
	// when they are at most this far apart.
	pairWindow = 10 * time.Minute
)

type sensorID struct {
	sensor   string
	quantity hourly.Quantity
}

type lastReading struct {
	t      time.Time
	v      float64
	sensor string
}

// ReadingChecks runs the reading-level checks of one station: plausible
// range, spikes, relative humidity above saturation, dew point above air
// temperature, and silence. It is not safe for concurrent use.
type ReadingChecks struct {
	site, station string
	cfg           *config.Alerts
	last          map[sensorID]lastReading
	seen          map[sensorID]time.Time // arrival time of the latest reading
	air, dew      lastReading            // latest air temperature and dew point readings
	// active, when set, tells whether an alert is active for a key; a good
	// verdict for a key with none would change nothing (see Step), so
	// observeInto does not build it. Nil: every verdict is returned.
	active func(alert.Key) bool
}

// NewReadingChecks returns the reading-level checks of one station.
func NewReadingChecks(site, station string, cfg *config.Alerts) *ReadingChecks {
	return &ReadingChecks{
		site: site, station: station, cfg: cfg,
		last: map[sensorID]lastReading{},
		seen: map[sensorID]time.Time{},
	}
}

func (c *ReadingChecks) key(sensor string, q hourly.Quantity, k alert.Kind) alert.Key {
	return alert.Key{Site: c.site, Station: c.station, Sensor: sensor, Quantity: q, Kind: k}
}

// Expect registers a sensor quantity that should report, as if it had last
// reported at since; the silence check then fires if it never reports.
func (c *ReadingChecks) Expect(sensor string, q hourly.Quantity, since time.Time) {
	id := sensorID{sensor, q}
	if _, ok := c.seen[id]; !ok {
		c.seen[id] = since
	}
}

// LastSeen sets when a sensor quantity last reported (e.g. restored from an
// active silence alert after a restart), so its silence is measured from
// then rather than from the restart.
func (c *ReadingChecks) LastSeen(sensor string, q hourly.Quantity, at time.Time) {
	c.seen[sensorID{sensor, q}] = at
}

// Resume sets the previous reading of a sensor quantity from the state
// file after a restart (its time and value), unless one was observed since,
// so the spike check compares the first reading after the restart with it.
func (c *ReadingChecks) Resume(sensor string, q hourly.Quantity, at time.Time, v float64) {
	id := sensorID{sensor, q}
	if _, ok := c.last[id]; !ok {
		c.last[id] = lastReading{t: at, v: v, sensor: sensor}
	}
}

// Observe checks one accepted sample that arrived at now and returns a
// finding for each check that applies to it.
func (c *ReadingChecks) Observe(s hourly.Sample, now time.Time) []Finding {
	return c.observeInto(nil, s, now)
}

// wanted reports whether a good verdict for k is worth building: always,
// unless active says no alert is active for k.
func (c *ReadingChecks) wanted(k alert.Key) bool { return c.active == nil || c.active(k) }

// observeInto is Observe appending to out (which the monitor reuses from
// reading to reading); good verdicts that would change no alert are left
// out when c.active is set.
func (c *ReadingChecks) observeInto(out []Finding, s hourly.Sample, now time.Time) []Finding {
	id := sensorID{s.Sensor, s.Quantity}
	lim := c.cfg.Limits(s.Quantity)
	clearAfter := c.cfg.ClearAfter.D()
	if f := c.heard(s.Sensor, s.Quantity, now); f.Status != StatusHold {
		out = append(out, f)
	}

	// Plausible range. A finding left at StatusHold is a good verdict not
	// built (see wanted): it would change nothing.
	f := Finding{Key: c.key(s.Sensor, s.Quantity, alert.KindRange), Severity: alert.SeverityCritical, Value: s.Value, At: s.Time, ClearAfter: clearAfter}
	switch {
	case s.Value < lim.Min:
		f.Status, f.Limit = StatusBad, lim.Min
		f.Message = fmt.Sprintf("%s reading %s below the plausible minimum %s", s.Quantity, num(s.Value), num(lim.Min))
	case s.Value > lim.Max:
		f.Status, f.Limit = StatusBad, lim.Max
		f.Message = fmt.Sprintf("%s reading %s above the plausible maximum %s", s.Quantity, num(s.Value), num(lim.Max))
	default:
		if c.wanted(f.Key) {
			f.Status = StatusGood
			f.Message = fmt.Sprintf("%s readings within %s..%s", s.Quantity, num(lim.Min), num(lim.Max))
		}
	}
	if f.Status != StatusHold {
		out = append(out, f)
	}

	// Spike: change per minute against the previous reading of the sensor.
	// Readings less than a minute apart are compared as if a minute apart,
	// so sampling faster does not make noise look like a spike.
	prev, hasPrev := c.last[id]
	if lim.SpikePerMinute > 0 && hasPrev && s.Time.After(prev.t) && s.Time.Sub(prev.t) <= spikeMaxGap {
		minutes := math.Max(s.Time.Sub(prev.t).Minutes(), 1)
		rate := math.Abs(s.Value-prev.v) / minutes
		f := Finding{Key: c.key(s.Sensor, s.Quantity, alert.KindSpike), Severity: alert.SeverityWarning, Value: rate, Limit: lim.SpikePerMinute, At: s.Time, ClearAfter: clearAfter}
		if rate > lim.SpikePerMinute {
			f.Status = StatusBad
			f.Message = fmt.Sprintf("%s changed %s -> %s in %s (%s per minute), limit %s per minute",
				s.Quantity, num(prev.v), num(s.Value), precision.Duration(s.Time.Sub(prev.t)), num(rate), num(lim.SpikePerMinute))
		} else if c.wanted(f.Key) {
			f.Status = StatusGood
			f.Message = fmt.Sprintf("%s changes within %s per minute", s.Quantity, num(lim.SpikePerMinute))
		}
		if f.Status != StatusHold {
			out = append(out, f)
		}
	}
	if !hasPrev || s.Time.After(prev.t) {
		c.last[id] = lastReading{t: s.Time, v: s.Value, sensor: s.Sensor}
	}

	switch s.Quantity {
	case hourly.RelHumidity:
		tol := *c.cfg.RHTolerance
		f := Finding{Key: c.key(s.Sensor, s.Quantity, alert.KindRHHigh), Severity: alert.SeverityWarning, Value: s.Value, Limit: 100 + tol, At: s.Time, ClearAfter: clearAfter}
		if s.Value > 100+tol {
			f.Status = StatusBad
			f.Message = fmt.Sprintf("relative humidity %s %%, more than %s %% above saturation", num(s.Value), num(tol))
		} else if c.wanted(f.Key) {
			f.Status = StatusGood
			f.Message = fmt.Sprintf("relative humidity at most %s %%", num(100+tol))
		}
		if f.Status != StatusHold {
			out = append(out, f)
		}
	case hourly.AirTemp:
		if s.Time.After(c.air.t) {
			c.air = lastReading{t: s.Time, v: s.Value, sensor: s.Sensor}
		}
		if c.dew.sensor != "" && absDur(s.Time.Sub(c.dew.t)) <= pairWindow {
			if f := c.dewFinding(c.dew, s.Value, s.Time); f.Status != StatusHold {
				out = append(out, f)
			}
		}
	case hourly.DewPoint:
		if s.Time.After(c.dew.t) {
			c.dew = lastReading{t: s.Time, v: s.Value, sensor: s.Sensor}
		}
		if c.air.sensor != "" && absDur(s.Time.Sub(c.air.t)) <= pairWindow {
			if f := c.dewFinding(lastReading{t: s.Time, v: s.Value, sensor: s.Sensor}, c.air.v, s.Time); f.Status != StatusHold {
				out = append(out, f)
			}
		}
	}
	return out
}

func (c *ReadingChecks) dewFinding(dew lastReading, air float64, at time.Time) Finding {
	tol := *c.cfg.DewTolerance
	f := Finding{Key: c.key(dew.sensor, hourly.DewPoint, alert.KindDewAboveAir), Severity: alert.SeverityWarning, Value: dew.v - air, Limit: tol, At: at, ClearAfter: c.cfg.ClearAfter.D()}
	if dew.v > air+tol {
		f.Status = StatusBad
		f.Message = fmt.Sprintf("dew point %s °C above air temperature %s °C by %s °C, tolerance %s °C", num(dew.v), num(air), num(dew.v-air), num(tol))
	} else if c.wanted(f.Key) {
		f.Status = StatusGood
		f.Message = fmt.Sprintf("dew point not above air temperature by more than %s °C", num(tol))
	}
	return f // StatusHold: a good verdict not built (see wanted)
}

// Heard notes that a reading of the sensor's quantity arrived at now (for
// the silence check) and returns the finding that it is reporting (a hold
// verdict, which changes nothing, when the monitor knows no silence alert
// of the sensor is active).
func (c *ReadingChecks) Heard(sensor string, q hourly.Quantity, now time.Time) Finding {
	return c.heard(sensor, q, now)
}

// heard is Heard; its finding is StatusHold (changes nothing) instead of
// a good verdict that would change no alert (see wanted).
func (c *ReadingChecks) heard(sensor string, q hourly.Quantity, now time.Time) Finding {
	id := sensorID{sensor, q}
	if t, ok := c.seen[id]; !ok || now.After(t) {
		c.seen[id] = now
	}
	f := Finding{Key: c.key(sensor, q, alert.KindSilence), Severity: alert.SeverityCritical, At: now}
	if c.wanted(f.Key) {
		f.Status = StatusGood
		f.Message = fmt.Sprintf("%s reading received at %s", q, now.UTC().Format(time.RFC3339))
	}
	return f
}

// Silence returns a finding for every known sensor quantity with a silence
// limit: bad when nothing arrived for longer than the limit before now.
func (c *ReadingChecks) Silence(now time.Time) []Finding {
	var out []Finding
	for id, t := range c.seen {
		lim := c.cfg.Limits(id.quantity).Silence
		if lim <= 0 {
			continue
		}
		// Value is the time of the last reading (unix seconds), so the
		// evidence stays the same while the sensor stays silent.
		f := Finding{Key: c.key(id.sensor, id.quantity, alert.KindSilence), Severity: alert.SeverityCritical, Value: float64(t.Unix()), Limit: lim.Seconds(), At: now}
		if now.Sub(t) > lim {
			f.Status = StatusBad
			f.Message = fmt.Sprintf("no %s reading since %s, limit %s", id.quantity, t.UTC().Format(time.RFC3339), lim)
		} else {
			f.Status = StatusGood
			f.Message = fmt.Sprintf("%s reporting", id.quantity)
		}
		out = append(out, f)
	}
	return out
}

// SilenceDeadline returns when a quantity that reported at now falls
// silent, or the zero time when its silence check is off.
func (c *ReadingChecks) SilenceDeadline(q hourly.Quantity, now time.Time) time.Time {
	lim := c.cfg.Limits(q).Silence
	if lim <= 0 {
		return time.Time{}
	}
	return now.Add(lim)
}

// NextSilence returns the earliest time at which a sensor quantity becomes
// silent, or the zero time when none can.
func (c *ReadingChecks) NextSilence() time.Time {
	var next time.Time
	for id, t := range c.seen {
		lim := c.cfg.Limits(id.quantity).Silence
		if lim <= 0 {
			continue
		}
		if d := t.Add(lim); next.IsZero() || d.Before(next) {
			next = d
		}
	}
	return next
}

func absDur(d time.Duration) time.Duration {
	if d < 0 {
		return -d
	}
	return d
}

// roundNum rounds v as num shows it: the value an alert payload carries.
func roundNum(v float64) float64 {
	r, err := strconv.ParseFloat(num(v), 64)
	if err != nil {
		return v
	}
	return r
}

// num formats a value for an alert message: about three significant
// digits, no exponent, no trailing zeros ("10", "0.735", "21.3").
func num(v float64) string {
	dec := 3
	switch a := math.Abs(v); {
	case a >= 1000:
		dec = 0
	case a >= 10:
		dec = 1
	case a >= 1:
		dec = 2
	}
	s := strconv.FormatFloat(v, 'f', dec, 64)
	if strings.Contains(s, ".") {
		s = strings.TrimRight(strings.TrimRight(s, "0"), ".")
	}
	if s == "-0" {
		s = "0"
	}
	return s
}
