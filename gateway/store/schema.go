package store

import (
	"strings"
	"time"

	"etpulse/gateway/vocab"
	"etpulse/hourly"
)

// Measurement names of the store schema. Every point's time is the start of
// the period it describes (the hour start for hourly records). Points with
// the same measurement, tags and time overwrite each other, so revision
// numbers and quality live in fields, never in tags. Victoria-metrics stores
// string fields as 0, so text goes to tags (when it identifies a series) or
// to Point.Notes (local history only).
const (
	// MeasurementHour is one station-hour (ClassHour).
	// Tags: site, station, reference (short, tall, fao56).
	// Fields (names from gateway/vocab, full precision for audit):
	// revision (int), complete (bool), flag_count (int), filled (bool),
	// rain_mm; cov_<quantity> (fraction 0-1 of the hour's coverage slots) per
	// quantity seen; when computed: air_temp_c, ea_kpa, wind_2m_m_s,
	// solar_mj_m2, et_mm, rn_mj_m2, g_mj_m2, rns_mj_m2, rnl_mj_m2, ra_mj_m2,
	// rso_mj_m2, rs_mj_m2, rs_rso, fcd, fcd_carried, fcd_default (bool),
	// es_kpa, vpd_kpa, delta_kpa_c, gamma_kpa_c, pressure_kpa,
	// sun_elevation_rad, day, net_rad_measured, soil_heat_measured (bool),
	// rad_term_mm, aero_term_mm. Energy and depth fields are per hour.
	// Notes: flags, fill, local_start.
	MeasurementHour = "et_hour"
	// MeasurementRaw is the summary of one quantity's samples in one hour
	// (ClassRaw, optional). Tags: site, station, quantity. Fields: samples
	// (int), coverage (fraction), min_<unit>, mean_<unit>, max_<unit> with
	// the quantity's canonical unit (see RawUnit).
	MeasurementRaw = "et_raw"
	// MeasurementZone is one zone balance step (ClassZone). Tags: site, zone.
	// Fields are the zone work's (depths in mm, e.g. depletion_mm).
	MeasurementZone = "zone_step"
	// MeasurementCommand is one valve runtime command (ClassCommand).
	// Tags: site, zone.
	MeasurementCommand = "valve_command"
	// MeasurementReport is one valve acknowledgement or run report
	// (ClassReport). Tags: site, zone.
	MeasurementReport = "valve_report"
	// MeasurementAlert is one sensor or station alert raised, updated or
	// cleared (ClassAlert). Tags: site, station, sensor, quantity, kind.
	MeasurementAlert = "sensor_alert"
	// MeasurementZoneAlert is one zone fault raised, updated or cleared
	// (ClassAlert): stale ET, a valve that does not answer, a run cut
	// short. Tags: site, zone, kind.
	MeasurementZoneAlert = "zone_alert"
	// MeasurementFlow is one flow meter's readings over a minute or so
	// (ClassReport). Tags: site, meter, and zone or source. Fields:
	// flow_l_min (mean over the interval), volume_l (litres in the
	// interval), seconds (the interval's length).
	MeasurementFlow = "flow_meter"
)

// FlowPoint builds a flow meter point (ClassReport, MeasurementFlow) at the
// start of the interval it covers; scope is "zone" or "source" and id its
// configured id.
func FlowPoint(site, meter, scope, id string, t time.Time, flowLMin, volumeL, seconds float64) Point {
	return Point{Class: ClassReport, Measurement: MeasurementFlow, Tags: tags("site", site, "meter", meter, scope, id),
		Fields: map[string]any{"flow_l_min": flowLMin, "volume_l": volumeL, "seconds": seconds}, Time: t}
}

// rawUnits names the canonical unit of each quantity in field names.
var rawUnits = map[hourly.Quantity]string{
	hourly.AirTemp:        "c",
	hourly.RelHumidity:    "pct",
	hourly.DewPoint:       "c",
	hourly.VapourPressure: "kpa",
	hourly.Wind:           "m_s",
	hourly.Solar:          "w_m2",
	hourly.Rain:           "mm",
	hourly.NetRad:         "w_m2",
	hourly.SoilHeat:       "w_m2",
	hourly.SoilWater:      "pct",
	hourly.SoilTension:    "kpa",
}

// RawUnit returns the unit suffix used in field names for quantity q
// ("c", "pct", "kpa", "m_s", "w_m2", "mm"), or "" for an unknown quantity.
func RawUnit(q hourly.Quantity) string { return rawUnits[q] }

// HourPoints returns the points of one hourly record: one MeasurementHour
// point at the hour start.
func HourPoints(rec hourly.Record) []Point {
	f := map[string]any{
		vocab.Revision:  int64(rec.Revision),
		vocab.Complete:  rec.Complete,
		vocab.FlagCount: int64(len(rec.Flags)),
		vocab.Filled:    rec.Fill != "",
		vocab.RainMM:    rec.Rain,
	}
	for q, s := range rec.Stats {
		f[vocab.Coverage(string(q))] = s.Coverage
	}
	if r := rec.Result; r != nil {
		for k, v := range map[string]any{
			vocab.AirTempC: rec.Inputs.AirTemp, vocab.EaKPa: rec.Inputs.Ea, vocab.Wind2mMS: rec.Inputs.Wind2,
			vocab.SolarMJ: rec.Inputs.Solar, vocab.ETmm: r.ET, vocab.RnMJ: r.Rn, vocab.GMJ: r.G,
			vocab.RnsMJ: r.Rns, vocab.RnlMJ: r.Rnl, vocab.RaMJ: r.Ra, vocab.RsoMJ: r.Rso, vocab.RsMJ: r.Rs,
			vocab.RsRso: r.RsRso, vocab.Fcd: r.Fcd,
			vocab.FcdCarried: r.FcdSource == hourly.FcdCarried, vocab.FcdDefault: r.FcdSource == hourly.FcdDefault,
			vocab.EsKPa: r.Es, vocab.VPDKPa: r.VPD, vocab.DeltaKPaC: r.Delta, vocab.GammaKPaC: r.Gamma,
			vocab.PressureKPa: r.Pressure, vocab.SunElevationRad: r.SunElevation, vocab.Day: r.Day,
			vocab.NetRadMeasured: r.NetRadMeasured, vocab.SoilHeatMeasured: r.SoilHeatMeasured,
			vocab.RadTermMM: r.RadiationTerm, vocab.AeroTermMM: r.AerodynamicTerm,
		} {
			f[k] = v
		}
	}
	notes := map[string]string{}
	if len(rec.Flags) > 0 {
		notes[vocab.Flags] = strings.Join(rec.Flags, ";")
	}
	if rec.Fill != "" {
		notes[vocab.Fill] = rec.Fill
	}
	if rec.LocalStart != "" {
		notes[vocab.LocalStart] = rec.LocalStart
	}
	return []Point{{
		Class:       ClassHour,
		Measurement: MeasurementHour,
		Tags:        tags("site", rec.Site, "station", rec.Station, "reference", string(rec.Reference)),
		Fields:      f,
		Notes:       notes,
		Time:        rec.Start,
	}}
}

// RawPoints returns one MeasurementRaw point per quantity with samples in
// the record, at the hour start.
func RawPoints(rec hourly.Record) []Point {
	var pts []Point
	for _, q := range hourly.Quantities {
		s, ok := rec.Stats[q]
		if !ok || s.Count == 0 {
			continue
		}
		u := rawUnits[q]
		pts = append(pts, Point{
			Class:       ClassRaw,
			Measurement: MeasurementRaw,
			Tags:        tags("site", rec.Site, "station", rec.Station, "quantity", string(q)),
			Fields: map[string]any{
				"samples":   int64(s.Count),
				"coverage":  s.Coverage,
				"min_" + u:  s.Min,
				"mean_" + u: s.Mean,
				"max_" + u:  s.Max,
			},
			Time: rec.Start,
		})
	}
	return pts
}

// ZonePoint builds a zone balance step point (ClassZone, MeasurementZone).
func ZonePoint(site, zone string, t time.Time, fields map[string]any) Point {
	return Point{Class: ClassZone, Measurement: MeasurementZone, Tags: tags("site", site, "zone", zone), Fields: fields, Time: t}
}

// CommandPoint builds a valve command point (ClassCommand, MeasurementCommand).
func CommandPoint(site, zone string, t time.Time, fields map[string]any) Point {
	return Point{Class: ClassCommand, Measurement: MeasurementCommand, Tags: tags("site", site, "zone", zone), Fields: fields, Time: t}
}

// ReportPoint builds a valve acknowledgement or run report point
// (ClassReport, MeasurementReport).
func ReportPoint(site, zone string, t time.Time, fields map[string]any) Point {
	return Point{Class: ClassReport, Measurement: MeasurementReport, Tags: tags("site", site, "zone", zone), Fields: fields, Time: t}
}

// AlertPoint builds an alert point (ClassAlert, MeasurementAlert). Empty
// station or sensor are left out of the tags.
func AlertPoint(site, station, sensor, kind string, t time.Time, fields map[string]any) Point {
	return Point{
		Class:       ClassAlert,
		Measurement: MeasurementAlert,
		Tags:        tags("site", site, "station", station, "sensor", sensor, "kind", kind),
		Fields:      fields,
		Time:        t,
	}
}

// ZoneAlertPoint builds a zone fault point (ClassAlert,
// MeasurementZoneAlert).
func ZoneAlertPoint(site, zone, kind string, t time.Time, fields map[string]any) Point {
	return Point{
		Class:       ClassAlert,
		Measurement: MeasurementZoneAlert,
		Tags:        tags("site", site, "zone", zone, "kind", kind),
		Fields:      fields,
		Time:        t,
	}
}

// tags builds a tag map from key, value pairs, leaving out empty values.
func tags(kv ...string) map[string]string {
	m := make(map[string]string, len(kv)/2)
	for i := 0; i+1 < len(kv); i += 2 {
		if kv[i+1] != "" {
			m[kv[i]] = kv[i+1]
		}
	}
	return m
}
