package hourcsv

import (
	"bytes"
	"errors"
	"io"
	"math"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"pgregory.net/rapid"

	"etpulse/hourly"
)

// readAll reads every row of src, collecting good rows and row errors.
func readAll(t *testing.T, src string, opt Options) ([]Row, []*RowError) {
	t.Helper()
	rd, err := NewReader(strings.NewReader(src), opt)
	require.NoError(t, err)
	var rows []Row
	var bad []*RowError
	for {
		row, err := rd.Read()
		if errors.Is(err, io.EOF) {
			return rows, bad
		}
		var re *RowError
		if errors.As(err, &re) {
			bad = append(bad, re)
			continue
		}
		require.NoError(t, err)
		rows = append(rows, row)
	}
}

func TestReadColumnsInAnyOrder(t *testing.T) {
	src := "# comment line\n" +
		" Solar_W_M2 ,wind_m_s,rain_mm,rh_pct,air_temp_c,time\n" +
		"\n" +
		"680.5556,3.3,0.2,52,38,2026-10-01T14:00\n" +
		"0,1.9,,90,28,2026-10-01T15:00\n"
	rows, bad := readAll(t, src, Options{UTCOffset: -1})
	require.Empty(t, bad)
	require.Len(t, rows, 2)

	r := rows[0]
	assert.Equal(t, 4, r.Line)
	_, off := r.Hour.Start.Zone()
	assert.Equal(t, -3600, off, "start is in station standard time")
	assert.Equal(t, time.Date(2026, 10, 1, 15, 0, 0, 0, time.UTC), r.Hour.Start.UTC())
	assert.Equal(t, 38.0, r.Hour.AirTemp)
	// FAO-56 Example 19 (from memory): T 38 degC, RH 52 % -> ea = 3.445 kPa
	// (eq. 54 with e°(38) = 6.625 kPa by eq. 11).
	assert.InDelta(t, 3.445, r.Hour.Ea, 0.0005)
	assert.Equal(t, 3.3, r.Hour.Wind2, "a sensor at 2 m is not adjusted")
	// FAO-56 Example 19: Rs = 2.450 MJ m-2 h-1 = 680.5556 W m-2 x 0.0036
	// (FAO-56 chapter 3 unit conversion).
	assert.InDelta(t, 2.450, r.Hour.Solar, 1e-6)
	assert.False(t, r.Hour.HasNetRad)
	assert.True(t, r.HasRain)
	assert.Equal(t, 0.2, r.Rain)
	assert.Zero(t, r.Gap)

	assert.False(t, rows[1].HasRain, "an empty optional cell is 'not measured'")
	assert.Zero(t, rows[1].Gap)
}

func TestReadSpreadsheetExport(t *testing.T) {
	// Byte order mark, quoted cells, CRLF line ends, as spreadsheets write.
	src := "\ufeff\"time\",\"Air_Temp_C\",\"rh_pct\",\"wind_m_s\",\"solar_w_m2\"\r\n" +
		"\"2026-07-14T12:00\",\"31.5\",\"40\",\"2.5\",\"900\"\r\n"
	rows, bad := readAll(t, src, Options{})
	require.Empty(t, bad)
	require.Len(t, rows, 1)
	assert.Equal(t, 31.5, rows[0].Hour.AirTemp)
}

func TestReadHumidityForms(t *testing.T) {
	// FAO-56 Annex 2 Table 2.3 (from memory): e°(20 degC) = 2.338 kPa, so a
	// dew point of 20 degC gives ea = 2.338 kPa (FAO-56 eq. 14).
	rows, bad := readAll(t, "time,air_temp_c,dew_point_c,wind_m_s,solar_w_m2\n2026-07-01T12:00,30,20,2,800\n", Options{})
	require.Empty(t, bad)
	assert.InDelta(t, 2.338, rows[0].Hour.Ea, 0.0005)

	rows, bad = readAll(t, "time,air_temp_c,ea_kpa,wind_m_s,solar_w_m2\n2026-07-01T12:00,30,1.75,2,800\n", Options{})
	require.Empty(t, bad)
	assert.Equal(t, 1.75, rows[0].Hour.Ea)
}

func TestReadWindHeight(t *testing.T) {
	// FAO-56 Example 14 (from memory): 3.2 m/s measured at 10 m is 2.4 m/s at
	// 2 m, published to one decimal. Re-derived by hand from FAO-56 eq. 47:
	// 4.87 / ln(67.8 x 10 - 5.42) = 4.87 / ln(672.58) = 4.87 / 6.5111 = 0.7480,
	// and 3.2 x 0.7480 = 2.393 m/s.
	rows, bad := readAll(t, "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n2026-07-01T12:00,30,40,3.2,800\n", Options{WindHeight: 10})
	require.Empty(t, bad)
	assert.InDelta(t, 2.4, rows[0].Hour.Wind2, 0.05)
	assert.InDelta(t, 2.393, rows[0].Hour.Wind2, 0.001)
}

func TestReadMeasuredFluxes(t *testing.T) {
	rows, bad := readAll(t, "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2,net_rad_w_m2,soil_heat_w_m2\n"+
		"2026-07-01T12:00,30,40,2,800,500,-20\n2026-07-01T13:00,30,40,2,800,,\n", Options{})
	require.Empty(t, bad)
	h := rows[0].Hour
	assert.True(t, h.HasNetRad)
	assert.InDelta(t, 1.8, h.NetRad, 1e-12)
	assert.True(t, h.HasSoilHeat)
	assert.InDelta(t, -0.072, h.SoilHeat, 1e-12)
	assert.False(t, rows[1].Hour.HasNetRad)
	assert.False(t, rows[1].Hour.HasSoilHeat)
}

func TestReadTimeForms(t *testing.T) {
	src := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n" +
		"2026-07-01T05:00,20,50,2,0\n" + // station standard time
		"2026-06-30T22:00:00Z,20,50,2,0\n" + // UTC -> 06:00 next day at UTC+8
		"2026-07-01T07:00:00+08:00,20,50,2,0\n" + // the station's own offset
		"2026-06-30T18:00:00-06:00,20,50,2,0\n" + // 2026-07-01T00:00Z -> 08:00
		"2026-07-01 09:00,20,50,2,0\n" + // space instead of T
		"2026-07-01T02:00:00.000Z,20,50,2,0\n" // fractional seconds: 10:00
	rows, bad := readAll(t, src, Options{UTCOffset: 8})
	require.Empty(t, bad)
	var got []string
	for _, r := range rows {
		got = append(got, string(AppendLocal(nil, r.Hour.Start)))
	}
	assert.Equal(t, []string{"2026-07-01T05:00", "2026-07-01T06:00", "2026-07-01T07:00",
		"2026-07-01T08:00", "2026-07-01T09:00", "2026-07-01T10:00"}, got)
}

func TestReadGapsAndOrder(t *testing.T) {
	src := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n" +
		"2026-07-01T00:00,20,50,2,0\n" +
		"2026-07-01T01:00,20,50,2,0\n" +
		"2026-07-01T04:00,20,50,2,0\n" + // 2 h missing
		"2026-07-01T04:00,20,50,2,0\n" + // repeat
		"2026-07-01T03:00,20,50,2,0\n" + // backwards
		"2026-07-01T05:00,20,50,2,0\n"
	rows, bad := readAll(t, src, Options{})
	require.Len(t, rows, 4)
	assert.Zero(t, rows[0].Gap)
	assert.Zero(t, rows[1].Gap)
	assert.Equal(t, 2*time.Hour, rows[2].Gap)
	assert.Zero(t, rows[3].Gap, "the bad rows in between do not count")
	require.Len(t, bad, 2)
	assert.Equal(t, `line 5: column time: value "2026-07-01T04:00": not after the previous hour 2026-07-01T04:00 (line 4): hours must be in increasing order without repeats`, bad[0].Error())
	assert.Equal(t, 6, bad[1].Line)
	assert.Equal(t, ColTime, bad[1].Column)
}

func TestReadBadRows(t *testing.T) {
	head := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2,rain_mm\n"
	for _, tc := range []struct {
		name, row, want string
	}{
		{"bad number", "2026-07-01T12:00,abc,50,2,800,0", `line 2: column air_temp_c: value "abc": not a number`},
		{"number with unit", "2026-07-01T12:00,30,50,2 m/s,800,0", `line 2: column wind_m_s: value "2 m/s": not a number: the unit "m/s" is in the value; write 2 (the column name gives the unit)`},
		{"nan", "2026-07-01T12:00,NaN,50,2,800,0", `line 2: column air_temp_c: value "NaN": not a finite number`},
		{"inf", "2026-07-01T12:00,30,50,2,+Inf,0", `line 2: column solar_w_m2: value "+Inf": not a finite number`},
		{"empty required", "2026-07-01T12:00,30,,2,800,0", `line 2: column rh_pct: value "": empty, and the column is required`},
		{"rh out of range", "2026-07-01T12:00,30,150,2,800,0", `line 2: column rh_pct: value "150": relative humidity: 150 % outside 0..100: bad input`},
		{"negative wind", "2026-07-01T12:00,30,50,-1,800,0", `line 2: column wind_m_s: value "-1": wind speed must be >= 0 m/s`},
		{"negative rain", "2026-07-01T12:00,30,50,2,800,-0.2", `line 2: column rain_mm: value "-0.2": rain must be >= 0 mm`},
		{"field count", "2026-07-01T12:00,30,50,2,800", `line 2: has 5 fields, the header has 6`},
		{"bad time", "01/07/2026 12:00,30,50,2,800,0", `line 2: column time: value "01/07/2026 12:00": ` + errTimeSyntax.Error()},
		{"impossible date", "2026-02-30T12:00,30,50,2,800,0", `line 2: column time: value "2026-02-30T12:00": day 30 out of range for 2026-02`},
		{"bad hour", "2026-07-01T24:00,30,50,2,800,0", `line 2: column time: value "2026-07-01T24:00": time of day 24:00:00 out of range`},
		{"not an hour start", "2026-07-01T12:30,30,50,2,800,0", `line 2: column time: value "2026-07-01T12:30": not the start of an hour of station standard time (UTC+00:00): 2026-07-01T12:30`},
		{"bare quote", `2026-07-01T12:00,3"0,50,2,800,0`, `line 2: bare " in non-quoted-field`},
	} {
		t.Run(tc.name, func(t *testing.T) {
			rows, bad := readAll(t, head+tc.row+"\n", Options{})
			assert.Empty(t, rows)
			require.Len(t, bad, 1)
			assert.Equal(t, tc.want, bad[0].Error())
			assert.Equal(t, 2, bad[0].Line)
		})
	}
}

func TestReadContinuesAfterBadRow(t *testing.T) {
	src := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n" +
		"2026-07-01T00:00,20,50,2,0\n" +
		"2026-07-01T01:00,x,50,2,0\n" +
		"2026-07-01T02:00,20,50,2\n" +
		"2026-07-01T03:00,20,50,2,0\n"
	rows, bad := readAll(t, src, Options{})
	require.Len(t, rows, 2)
	assert.Equal(t, 5, rows[1].Line)
	assert.Equal(t, 2*time.Hour, rows[1].Gap)
	require.Len(t, bad, 2)
	assert.Equal(t, 3, bad[0].Line)
	assert.Equal(t, 4, bad[1].Line)
}

func TestHeaderErrors(t *testing.T) {
	for _, tc := range []struct {
		name, src, want string
	}{
		{"empty input", "", "read weather csv: bad header: empty input, expected a header line naming the columns"},
		{"only comments", "# nothing\n\n", "read weather csv: bad header: empty input, expected a header line naming the columns"},
		{"unknown column", "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2,leaf_wetness\n",
			`read weather csv: bad header: line 1: unknown column "leaf_wetness" (accepted: time, air_temp_c, rh_pct, dew_point_c, ea_kpa, wind_m_s, wind_2m_m_s, solar_w_m2, net_rad_w_m2, soil_heat_w_m2, rain_mm)`},
		{"missing time", "air_temp_c,rh_pct,wind_m_s,solar_w_m2\n", `read weather csv: bad header: line 1: missing required column "time"`},
		{"missing air temp", "time,rh_pct,wind_m_s,solar_w_m2\n", `read weather csv: bad header: line 1: missing required column "air_temp_c"`},
		{"missing wind", "time,air_temp_c,rh_pct,solar_w_m2\n", `read weather csv: bad header: line 1: missing required column "wind_m_s"`},
		{"missing solar", "# c\ntime,air_temp_c,rh_pct,wind_m_s\n", `read weather csv: bad header: line 2: missing required column "solar_w_m2"`},
		{"no humidity", "time,air_temp_c,wind_m_s,solar_w_m2\n",
			"read weather csv: bad header: line 1: missing humidity column: give exactly one of rh_pct, dew_point_c or ea_kpa"},
		{"two humidity", "time,air_temp_c,rh_pct,dew_point_c,wind_m_s,solar_w_m2\n",
			"read weather csv: bad header: line 1: columns dew_point_c and rh_pct all give humidity: give exactly one of rh_pct, dew_point_c or ea_kpa"},
		{"duplicate", "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2,Time\n",
			`read weather csv: bad header: line 1: column "time" appears twice (columns 1 and 6)`},
		{"bad quote", "time,\"air_temp_c\"x,rh_pct\n", `read weather csv: bad header: line 1: extraneous or missing " in quoted-field`},
		{"empty name", "time,air_temp_c,,rh_pct,wind_m_s,solar_w_m2\n", "read weather csv: bad header: line 1: column 3 has an empty name"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := NewReader(strings.NewReader(tc.src), Options{})
			require.Error(t, err)
			assert.ErrorIs(t, err, ErrHeader)
			assert.Equal(t, tc.want, err.Error())
		})
	}
}

func TestReaderOptionErrors(t *testing.T) {
	_, err := NewReader(strings.NewReader("x\n"), Options{WindHeight: 0.1})
	require.ErrorIs(t, err, hourly.ErrInput)
	assert.Contains(t, err.Error(), "wind height: 0.1 m")
	_, err = NewReader(strings.NewReader("x\n"), Options{UTCOffset: 3.3})
	assert.EqualError(t, err, "read weather csv: standard zone: utc offset must be a multiple of 15 minutes, got 3.3 h")
}

func TestStandardZone(t *testing.T) {
	for _, tc := range []struct {
		off  float64
		name string
	}{{-8, "UTC-08:00"}, {0, "UTC+00:00"}, {5.75, "UTC+05:45"}, {-3.5, "UTC-03:30"}, {14, "UTC+14:00"}} {
		z, err := StandardZone(tc.off)
		require.NoError(t, err)
		name, secs := time.Unix(0, 0).In(z).Zone()
		assert.Equal(t, tc.name, name)
		assert.Equal(t, int(tc.off*3600), secs)
	}
	_, err := StandardZone(-15)
	assert.EqualError(t, err, "standard zone: utc offset must be within -14..14 hours, got -15")
}

func TestAppendFixed(t *testing.T) {
	for _, tc := range []struct {
		v    float64
		prec int
		want string
	}{{0.62694, 4, "0.6269"}, {-0.00004, 4, "0.0000"}, {-0.00005001, 4, "-0.0001"}, {-0.0103, 4, "-0.0103"}, {3, 3, "3.000"}, {math.Copysign(0, -1), 2, "0.00"}, {math.Copysign(0, -1), 9, "0.000000000"}, {-1e-12, 9, "0.000000000"}} {
		assert.Equal(t, tc.want, string(AppendFixed(nil, tc.v, tc.prec)), "%v", tc.v)
	}
}

// TestAppendFixedMatchesStrconv: the fast path must write what
// strconv.AppendFloat writes, including at ties and large magnitudes.
func TestAppendFixedMatchesStrconv(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		prec := rapid.IntRange(0, 8).Draw(t, "prec")
		v := rapid.OneOf(
			rapid.Float64Range(-10, 10),
			rapid.Float64Range(-1e13, 1e13),
			rapid.Map(rapid.Int64Range(-2_000_000, 2_000_000), func(n int64) float64 { return float64(n) / 20000 }), // ties at 4 decimals
			rapid.Map(rapid.Int64Range(-2_000_000, 2_000_000), func(n int64) float64 { return float64(n) / 2000 }),  // ties at 3 decimals
		).Draw(t, "v")
		want := strconv.FormatFloat(v, 'f', prec, 64)
		if strings.Trim(want, "-0.") == "" {
			want = strings.TrimPrefix(want, "-")
		}
		if got := string(AppendFixed(nil, v, prec)); got != want {
			t.Fatalf("AppendFixed(%v, %d) = %s, strconv gives %s", v, prec, got, want)
		}
	})
}

func BenchmarkReadHours(b *testing.B) {
	data := SyntheticYears(2026, 10)
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	rows := 0
	for b.Loop() {
		rd, err := NewReader(bytes.NewReader(data), Options{UTCOffset: 1, WindHeight: 3})
		if err != nil {
			b.Fatal(err)
		}
		for {
			_, err := rd.Read()
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				b.Fatal(err)
			}
			rows++
		}
	}
	b.ReportMetric(float64(rows)/b.Elapsed().Seconds(), "rows/s")
}
