package store

import (
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/hourly"
)

// example19Record is the 14-15 h hour of FAO-56 Example 19 (hourly ETo at
// N'Diaye, Senegal, 16°13'N 16°15'W, 8 m, 2 October; Lz = 15° so local
// standard time is UTC-1). Values from memory of FAO-56 Example 19:
// T = 38 °C, RH = 52 %, u2 = 3.3 m/s, Rs = 2.450 MJ m-2 h-1, e°(T) = 6.625
// kPa, ea = 3.445 kPa, Δ = 0.358 kPa/°C, γ = 0.0673 kPa/°C, Ra = 3.543,
// Rso = 2.658, Rns = 1.887, Rnl = 0.137, Rn = 1.749, G = 0.175 MJ m-2 h-1,
// ETo = 0.63 mm/h. Re-derivable: Rns = 0.77 × 2.450 = 1.887 (FAO-56 eq. 38),
// Rn = 1.887 - 0.137 = 1.750 (eq. 40, within the example's rounding),
// G = 0.1 Rn = 0.175 (eq. 45). The schema test checks the mapping of these
// numbers to line protocol, not the computation.
func example19Record() hourly.Record {
	start := time.Date(2023, 10, 2, 15, 0, 0, 0, time.UTC) // 14:00 local standard time (UTC-1)
	return hourly.Record{
		Site: "ndiaye", Station: "mast", Reference: hourly.FAO56,
		Start: start, End: start.Add(time.Hour), LocalStart: "2023-10-02T14:00",
		Revision: 1, Complete: true,
		Inputs: hourly.Hour{Start: start, AirTemp: 38, Ea: 3.445, Wind2: 3.3, Solar: 2.450},
		Stats: map[hourly.Quantity]hourly.Stats{
			hourly.AirTemp:     {Count: 60, Min: 37.6, Max: 38.4, Mean: 38, Coverage: 1},
			hourly.RelHumidity: {Count: 60, Min: 50, Max: 54, Mean: 52, Coverage: 1},
			hourly.Wind:        {Count: 58, Min: 2.1, Max: 4.4, Mean: 3.3, Coverage: 0.95},
			hourly.Solar:       {Count: 60, Min: 640, Max: 720, Mean: 680.6, Coverage: 1},
		},
		Result: &hourly.Result{
			Reference: hourly.FAO56, Day: true,
			Pressure: 101.2, Gamma: 0.0673, Delta: 0.358, Es: 6.625, Ea: 3.445, VPD: 3.180,
			SunElevation: 0.9, Ra: 3.543, Rso: 2.658, Rs: 2.450, RsRso: 0.922, Fcd: 0.84, FcdSource: hourly.FcdComputed,
			Rns: 1.887, Rnl: 0.137, Rn: 1.749, G: 0.175,
			Cn: 37, Cd: 0.24, RadiationTerm: 0.40, AerodynamicTerm: 0.23, ET: 0.63,
		},
		Flags: []string{"late:1"},
	}
}

// parseLine splits one line of line protocol without escapes into its parts.
func parseLine(t *testing.T, line string) (measurement string, tags, fields map[string]string, ts string) {
	t.Helper()
	parts := strings.Split(line, " ")
	require.Len(t, parts, 3, line)
	head := strings.Split(parts[0], ",")
	tags = map[string]string{}
	for _, kv := range head[1:] {
		k, v, ok := strings.Cut(kv, "=")
		require.True(t, ok, kv)
		tags[k] = v
	}
	fields = map[string]string{}
	for _, kv := range strings.Split(parts[1], ",") {
		k, v, ok := strings.Cut(kv, "=")
		require.True(t, ok, kv)
		fields[k] = v
	}
	return head[0], tags, fields, parts[2]
}

func TestHourPointsLineProtocol(t *testing.T) {
	pts := HourPoints(example19Record())
	require.Len(t, pts, 1)
	p := pts[0]
	require.NoError(t, Validate(p))
	assert.Equal(t, ClassHour, p.Class)
	m, tags, fields, ts := parseLine(t, Line(p))
	assert.Equal(t, "et_hour", m)
	assert.Equal(t, map[string]string{"site": "ndiaye", "station": "mast", "reference": "fao56"}, tags)
	assert.Equal(t, "1696258800000000000", ts, "hour start 2023-10-02T15:00Z in ns")
	assert.Equal(t, map[string]string{
		"revision": "1i", "complete": "true", "flag_count": "1i", "filled": "false", "rain_mm": "0",
		"cov_air_temp": "1", "cov_rel_humidity": "1", "cov_wind": "0.95", "cov_solar": "1",
		"air_temp_c": "38", "ea_kpa": "3.445", "wind_2m_m_s": "3.3", "solar_mj_m2": "2.45", "rs_mj_m2": "2.45",
		"et_mm": "0.63", "rn_mj_m2": "1.749", "g_mj_m2": "0.175", "rns_mj_m2": "1.887", "rnl_mj_m2": "0.137",
		"ra_mj_m2": "3.543", "rso_mj_m2": "2.658", "rs_rso": "0.922", "fcd": "0.84",
		"fcd_carried": "false", "fcd_default": "false",
		"es_kpa": "6.625", "vpd_kpa": "3.18", "delta_kpa_c": "0.358", "gamma_kpa_c": "0.0673", "pressure_kpa": "101.2",
		"sun_elevation_rad": "0.9", "day": "true", "net_rad_measured": "false", "soil_heat_measured": "false",
		"rad_term_mm": "0.4", "aero_term_mm": "0.23",
	}, fields)
	// Text stays out of the line (victoria-metrics would store it as 0) and
	// in the local history's notes.
	assert.Equal(t, map[string]string{"flags": "late:1", "local_start": "2023-10-02T14:00"}, p.Notes)
}

func TestHourPointsIncomplete(t *testing.T) {
	rec := example19Record()
	rec.Complete, rec.Result, rec.Revision = false, nil, 0
	rec.Flags = []string{"incomplete:solar"}
	_, _, fields, _ := parseLine(t, Line(HourPoints(rec)[0]))
	assert.Equal(t, "false", fields["complete"])
	assert.Equal(t, "0i", fields["revision"])
	assert.NotContains(t, fields, "et_mm", "no ET for an incomplete hour")
	assert.NotContains(t, fields, "air_temp_c", "inputs only with a computed result")
	assert.Equal(t, "0.95", fields["cov_wind"])
}

func TestRawPoints(t *testing.T) {
	pts := RawPoints(example19Record())
	require.Len(t, pts, 4)
	assert.Equal(t, "et_raw,quantity=air_temp,site=ndiaye,station=mast coverage=1,max_c=38.4,mean_c=38,min_c=37.6,samples=60i 1696258800000000000", Line(pts[0]))
	assert.Equal(t, "et_raw,quantity=solar,site=ndiaye,station=mast coverage=1,max_w_m2=720,mean_w_m2=680.6,min_w_m2=640,samples=60i 1696258800000000000", Line(pts[3]))
	for _, p := range pts {
		assert.Equal(t, ClassRaw, p.Class)
	}
	for _, q := range hourly.Quantities {
		assert.NotEmpty(t, RawUnit(q), q)
	}
}

func TestBuilders(t *testing.T) {
	at := time.Date(2024, 5, 1, 6, 0, 0, 0, time.UTC)
	assert.Equal(t, "zone_step,site=lowmead,zone=block-a depletion_mm=12.5 1714543200000000000",
		Line(ZonePoint("lowmead", "block-a", at, map[string]any{"depletion_mm": 12.5})))
	assert.Equal(t, "valve_command,site=lowmead,zone=block-a minutes=42i 1714543200000000000",
		Line(CommandPoint("lowmead", "block-a", at, map[string]any{"minutes": 42})))
	assert.Equal(t, "valve_report,site=lowmead,zone=block-a applied_mm=6.1 1714543200000000000",
		Line(ReportPoint("lowmead", "block-a", at, map[string]any{"applied_mm": 6.1})))
	assert.Equal(t, "sensor_alert,kind=stuck,site=lowmead,station=mast active=true 1714543200000000000",
		Line(AlertPoint("lowmead", "mast", "", "stuck", at, map[string]any{"active": true})), "empty sensor tag left out")
}
