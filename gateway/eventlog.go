package gateway

import (
	"log/slog"

	"etpulse/gateway/internal/precision"
	"etpulse/hourly"
)

// logClosed writes one INFO line per committed hour record (a first
// emission or a revision), so the journal alone shows the gateway at work:
// station, hour, reference, ET in mm (absent in an incomplete hour),
// completeness, gap filling, flags and revision.
func (g *Gateway) logClosed(recs []hourly.Record) {
	for _, rec := range recs {
		attrs := []any{"site", rec.Site, "station", rec.Station, "hour_start", rec.Start.UTC(),
			"local_start", rec.LocalStart, "reference", string(rec.Reference)}
		if rec.Result != nil {
			attrs = append(attrs, slog.Float64("et_mm", precision.Round(precision.MM, rec.Result.ET)))
		}
		flags := rec.Flags
		if flags == nil {
			flags = []string{}
		}
		attrs = append(attrs, "complete", rec.Complete, "fill", rec.Fill, "flags", flags, "revision", rec.Revision)
		g.log.Info("hour closed", attrs...)
	}
}
