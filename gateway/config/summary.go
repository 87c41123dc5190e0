package config

import (
	"fmt"
	"io"
	"math"
	"strings"
	"text/tabwriter"
	"time"

	"etpulse/controllers"
	"etpulse/hourly"
)

// Summary writes a human-readable overview of the configuration: the
// broker, each site with its stations (coordinates, reference, timing) and
// their sensors (topic, format, quantity, unit), and the zone and water
// source counts. Secrets are shown by source only.
func (c *Config) Summary(w io.Writer) error {
	ew := &errWriter{w: w}
	b := c.Broker
	ew.printf("broker    %s\n", b.URL)
	ew.printf("          client id %s, user %s, password %s, tls %s\n",
		b.ClientID, orNone(b.Username), b.Password, tlsSummary(b))
	ew.printf("          keepalive %s, connect timeout %s, max in-flight %d, max payload %d bytes\n",
		fmtDur(b.KeepAlive.D()), fmtDur(b.ConnectTimeout.D()), b.MaxInflight, b.MaxPayloadBytes)
	ew.printf("state     %s\n", c.State.Path)
	if c.State.Journalled() && c.State.CheckpointEvery > 0 {
		ew.printf("journal   %s.journal: messages acknowledged in windows of up to %s or 16, written into the state file every %s (and whenever an hour closes)\n",
			c.State.Path, fmtDur(c.State.AckWindow.D()), fmtDur(c.State.CheckpointEvery.D()))
	} else {
		ew.printf("journal   off: every batch of messages is written into the state file before it is acknowledged\n")
	}
	p := c.Prefix()
	ew.printf("topics    records %s, zones %s and %s, holds %s, water %s, alerts %s/...\n",
		RecordTopic(p, "<site>", "<station>"), ZoneCommandTopic(p, "<site>", "<zone>"), ZoneReportTopic(p, "<site>", "<zone>"),
		HoldTopic(p, "<site>"), WaterTopic(p, "<site>"), AlertRoot(c.Alerts.TopicPrefix, "<site>"))

	stations, sensors := 0, 0
	for _, s := range c.Sites {
		stations += len(s.Stations)
		for _, st := range s.Stations {
			sensors += len(st.Sensors)
		}
	}
	ew.printf("sites     %d, stations %d, sensor topics %d\n", len(c.Sites), stations, sensors)
	for _, s := range c.Sites {
		ew.printf("\nsite %s: %d station(s), %d zone(s), %d water source(s)\n", s.ID, len(s.Stations), len(s.Zones), len(s.Sources))
		for i := range s.Stations {
			st := &s.Stations[i]
			ew.printf("  station %s  %s %s  %g m  UTC%s  reference %s  clear sky %s\n",
				st.ID, latitude(st.Latitude), longitude(st.Longitude), st.Elevation, offset(st.UTCOffset),
				referenceName(st.Reference), st.ClearSky)
			ew.printf("    wind sensor at %g m, min coverage %g%%, close grace %s, late window %s, silence close %s, max future %s\n",
				st.WindHeight, st.MinCoverage*100, fmtDur(st.CloseGrace.D()), fmtDur(st.LateWindow.D()),
				fmtDur(st.SilenceClose.D()), fmtDur(st.MaxFuture.D()))
			tw := tabwriter.NewWriter(ew, 2, 4, 2, ' ', 0)
			fmt.Fprintln(tw, "    sensor\ttopic\tformat\tkey\tquantity\tunit\tnotes")
			for _, sn := range st.Sensors {
				chs := sn.Channels()
				for i, k := range SortedKeys(chs) {
					ch := chs[k]
					key := k
					switch {
					case sn.Format == FormatJSON:
						key = sn.ValueKey
					case key == "":
						key = "-"
					}
					id, topic, format := sn.ID, sn.Topic, string(sn.Format)
					if i > 0 { // further channels of the same payload
						id, topic, format = "", "", ""
					}
					fmt.Fprintf(tw, "    %s\t%s\t%s\t%s\t%s\t%s\t%s\n", id, topic, format, key, ch.Quantity, unitName(ch), notes(sn, ch, i == 0))
				}
			}
			if err := tw.Flush(); err != nil {
				return fmt.Errorf("config summary: %w", err)
			}
		}
		for i := range s.Zones {
			zoneSummary(ew, &s.Zones[i], &s)
		}
	}
	if ew.err != nil {
		return fmt.Errorf("config summary: %w", ew.err)
	}
	return nil
}

// zoneSummary writes a zone's levels, rate, capacity under its caps and its
// peak-month ETc against that capacity.
func zoneSummary(ew *errWriter, z *Zone, s *Site) {
	ew.printf("  zone %s  station %s  valve %s  source %s  %s  %s m2  windows %s\n",
		z.ID, z.Station, z.Valve, orNone(z.Source), z.System.Type, fmtF(z.AreaM2), strings.Join(z.Windows, ", "))
	cz, err := z.Controller(s.StationByID(z.Station))
	if err != nil {
		ew.printf("    (no summary: %v)\n", err)
		return
	}
	// Levels at the shallowest and the deepest roots, with the tabled p (an
	// empty balance has no recent ETc to adjust p with).
	shallow, deep := time.Date(2025, 1, 1, 12, 0, 0, 0, cz.Loc), time.Date(2025, 1, 1, 12, 0, 0, 0, cz.Loc)
	if se := cz.Crop.Season; se != nil {
		shallow = time.Date(2025, se.StartMonth, se.StartDay, 12, 0, 0, 0, cz.Loc)
		deep = shallow.AddDate(0, 0, se.Initial+se.Development)
	}
	lo, hi := cz.LevelsAt(&controllers.State{}, shallow), cz.LevelsAt(&controllers.State{}, deep)
	span := func(a, b float64) string {
		if a == b {
			return fmtF(round2(a))
		}
		return fmtF(round2(a)) + "-" + fmtF(round2(b))
	}
	pNote := "p " + fmtF(z.Soil.P)
	if z.Soil.AdjustP {
		pNote += ", adjusted daily: FAO-56 Table 22 footnote"
	}
	trig := "RAW"
	if z.Soil.TriggerMM > 0 {
		trig = "trigger_mm"
	}
	ew.printf("    TAW %s mm (root depth %s m), RAW %s mm (%s), trigger %s mm (%s), refill target %s mm (%s x RAW)\n",
		span(lo.TAW, hi.TAW), span(lo.Zr, hi.Zr), span(lo.RAW, hi.RAW), pNote, span(lo.Trigger, hi.Trigger), trig,
		span(lo.Target, hi.Target), fmtF(z.Soil.RefillFraction))
	orchardSummary(ew, z, cz, s)
	ceil := func(m float64) float64 { return math.Ceil(m - 1e-9) }
	ew.printf("    rate %s mm/h (%s), efficiency %s: RAW takes %s min\n",
		fmtF(math.Round(cz.System.Rate*1e4)/1e4), z.RateSource(), fmtF(cz.System.Efficiency),
		span(ceil(cz.MinutesFor(lo.RAW)), ceil(cz.MinutesFor(hi.RAW))))
	r := cz.BestWindowRun()
	cycles := ""
	if r.Cycles > 1 {
		cycles = fmt.Sprintf(", %d cycles with %d min soaks", r.Cycles, cz.System.SoakMinutes)
	}
	ew.printf("    one window %d min = %s mm net (%s%s; bounded by %s)\n", r.Minutes, fmtF(round2(r.Net)), r.Window, cycles, r.Limit)
	ref, from := z.PeakReferenceET()
	peak := cz.PeakETc(ref)
	minutes, capacity := cz.DailyCapacity()
	verdict := "keeps up"
	if capacity < peak {
		verdict = "CANNOT KEEP UP (see the warning)"
	}
	ew.printf("    peak month ETc %s mm/day (peak Kc %s x %s mm/day, %s) against a capacity of %s mm/day (%d min/day): %s\n",
		fmtF(round2(peak)), fmtF(round2(cz.PeakKc())), fmtF(ref), from, fmtF(round2(capacity)), minutes, verdict)
}

func notes(sn Sensor, ch Channel, first bool) string {
	var n []string
	if ch.Quantity == hourly.Rain {
		switch ch.RainMode {
		case RainTips:
			n = append(n, fmt.Sprintf("tips x %g mm", ch.MMPerTip))
		case RainCounter:
			if ch.MMPerTip > 0 {
				n = append(n, fmt.Sprintf("counter of tips x %g mm", ch.MMPerTip))
			} else {
				n = append(n, "counter")
			}
			if ch.RolloverAt > 0 {
				n = append(n, fmt.Sprintf("wraps at %g", ch.RolloverAt))
			}
		default:
			n = append(n, "increment")
		}
	}
	if !first {
		return strings.Join(n, "; ")
	}
	if sn.TimeKey != "" {
		n = append(n, "time key "+sn.TimeKey)
	}
	if len(sn.Ignore) > 0 {
		n = append(n, "ignores "+strings.Join(sn.Ignore, ","))
	}
	return strings.Join(n, "; ")
}

func unitName(ch Channel) string {
	if ch.Unit == "" && ch.Quantity == hourly.Rain && ch.MMPerTip > 0 {
		return "tips"
	}
	return ch.Unit
}

func referenceName(r hourly.Reference) string {
	switch r {
	case hourly.Short:
		return "short (ETos)"
	case hourly.Tall:
		return "tall (ETrs)"
	case hourly.FAO56:
		return "fao56 (ETo)"
	}
	return string(r)
}

func tlsSummary(b Broker) string {
	if !b.TLSScheme() {
		return "off"
	}
	var parts []string
	if b.TLS.CAFile != "" {
		parts = append(parts, "ca "+b.TLS.CAFile)
	} else {
		parts = append(parts, "system roots")
	}
	if b.TLS.CertFile != "" {
		parts = append(parts, "client cert "+b.TLS.CertFile)
	}
	if b.TLS.InsecureSkipVerify {
		parts = append(parts, "NOT VERIFYING the server certificate")
	}
	return "on (" + strings.Join(parts, ", ") + ")"
}

func orNone(s string) string {
	if s == "" {
		return "(none)"
	}
	return s
}

func latitude(v float64) string {
	if v < 0 {
		return fmt.Sprintf("%.4f S", -v)
	}
	return fmt.Sprintf("%.4f N", v)
}

func longitude(v float64) string {
	if v < 0 {
		return fmt.Sprintf("%.4f W", -v)
	}
	return fmt.Sprintf("%.4f E", v)
}

func offset(h float64) string {
	sign := "+"
	if h < 0 {
		sign = "-"
	}
	a := math.Abs(h)
	hh := int(a)
	mm := int(math.Round((a - float64(hh)) * 60))
	if mm == 0 {
		return fmt.Sprintf("%s%d", sign, hh)
	}
	return fmt.Sprintf("%s%d:%02d", sign, hh, mm)
}

// errWriter remembers the first write error.
type errWriter struct {
	w   io.Writer
	err error
}

func (e *errWriter) Write(p []byte) (int, error) {
	if e.err != nil {
		return 0, e.err
	}
	n, err := e.w.Write(p)
	e.err = err
	return n, err
}

func (e *errWriter) printf(format string, args ...any) { fmt.Fprintf(e, format, args...) }
