package hourcsv

import (
	"bytes"
	"errors"
	"io"
	"math"
	"testing"
	"time"

	"etpulse/hourly"
)

// FuzzReadHours feeds arbitrary bytes to the reader. It must never panic
// or loop, and every row it accepts must be usable by hourly.Compute
// without surprises: finite values, an hour start in station standard time,
// strictly increasing starts, a gap that is a whole number of hours. Every
// rejected row must carry its line number. The committed corpus lives in
// testdata/fuzz/FuzzReadHours.
func FuzzReadHours(f *testing.F) {
	f.Add([]byte("time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n2026-10-01T14:00,38,52,3.3,680.5556\n2026-10-01T15:00,37,50,3.1,600\n"), 0.0, 2.0)
	f.Add([]byte("time,air_temp_c,dew_point_c,wind_m_s,solar_w_m2,rain_mm\n2026-07-01T00:00:00Z,20,12,2,0,0.2\n"), -8.0, 10.0)
	f.Add([]byte("ea_kpa,time,air_temp_c,wind_m_s,solar_w_m2,net_rad_w_m2,soil_heat_w_m2\n1.2,2026-01-01T00:00+05:30,5,1,0,-40,-8\n"), 5.5, 3.0)
	f.Add(SyntheticYears(2026, 1)[:1200], 1.0, 2.0)
	// The old column names (OldColumns), still read.
	f.Add([]byte("time,air_temp_c,dewpoint_c,wind_ms,solar_wm2,net_rad_wm2,soil_heat_wm2\n2026-07-01T12:00,30,20,2,800,500,50\n"), 0.0, 3.0)
	f.Fuzz(checkReadHours)
}

func checkReadHours(t *testing.T, data []byte, utcOffset, windHeight float64) {
	{
		if math.IsNaN(utcOffset) || utcOffset < -14 || utcOffset > 14 || math.Mod(utcOffset*4, 1) != 0 {
			utcOffset = 0
		}
		if math.IsNaN(windHeight) || windHeight < 0.5 || windHeight > 100 {
			windHeight = 2
		}
		rd, err := NewReader(bytes.NewReader(data), Options{UTCOffset: utcOffset, WindHeight: windHeight})
		if err != nil {
			if !errors.Is(err, ErrHeader) {
				t.Fatalf("header error does not wrap ErrHeader: %v", err)
			}
			return
		}
		zone, _ := StandardZone(utcOffset)
		_, zoneOff := time.Unix(0, 0).In(zone).Zone()
		var prev time.Time
		for i := 0; ; i++ {
			if i > len(data)+1 {
				t.Fatalf("more rows than bytes: the reader does not advance")
			}
			row, err := rd.Read()
			if errors.Is(err, io.EOF) {
				return
			}
			if err != nil {
				var re *RowError
				if !errors.As(err, &re) {
					t.Fatalf("non-row error from an in-memory reader: %v", err)
				}
				if re.Line < 1 || re.Err == nil {
					t.Fatalf("row error without line or cause: %#v", re)
				}
				continue
			}
			h := row.Hour
			for name, v := range map[string]float64{"air": h.AirTemp, "ea": h.Ea, "wind": h.Wind2, "solar": h.Solar,
				"netrad": h.NetRad, "soil": h.SoilHeat, "rain": row.Rain} {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					t.Fatalf("line %d: %s is %v", row.Line, name, v)
				}
			}
			if h.Ea < 0 || h.Wind2 < 0 || row.Rain < 0 {
				t.Fatalf("line %d: negative ea/wind/rain: %+v", row.Line, row)
			}
			if _, off := h.Start.Zone(); off != zoneOff {
				t.Fatalf("line %d: start %v not in station standard time", row.Line, h.Start)
			}
			if _, m, s := h.Start.Clock(); m != 0 || s != 0 || h.Start.Nanosecond() != 0 {
				t.Fatalf("line %d: start %v is not an hour start", row.Line, h.Start)
			}
			if !prev.IsZero() && (!h.Start.After(prev) || row.Gap != (h.Start.Sub(prev)-time.Hour).Truncate(time.Hour)) {
				t.Fatalf("line %d: start %v after %v with gap %v", row.Line, h.Start, prev, row.Gap)
			}
			if row.Gap%time.Hour != 0 {
				t.Fatalf("line %d: gap %v is not whole hours", row.Line, row.Gap)
			}
			prev = h.Start
			// The engine may refuse the values (with ErrInput) but must not
			// produce a NaN.
			res, _, err := hourly.Compute(hourly.Station{Latitude: 40, Longitude: math.Max(-180, math.Min(180, 15*utcOffset)), UTCOffset: utcOffset}, hourly.Short, h, hourly.Carry{})
			if err == nil && (math.IsNaN(res.ET) || math.IsInf(res.ET, 0)) {
				t.Fatalf("line %d: ET %v from %+v", row.Line, res.ET, h)
			}
		}
	}
}
