package main

import (
	"bytes"
	"context"
	"encoding/csv"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/hourcsv"
	"etpulse/gateway/loadgen"
	"etpulse/hourly"
)

var update = flag.Bool("update", false, "rewrite the golden files of the calc tests")

// demoArgs are the station flags of the bundled demo orchard (invented).
var demoArgs = []string{"--lat", "37.48", "--lon", "14.06", "--elevation", "310", "--utc-offset", "1", "--wind-height", "3"}

const demoFile = "../../testdata/calc/halcyon-terrace.csv"

// calc runs `etpulse calc args...` with stdin and returns exit code, stdout
// and stderr.
func calc(t testing.TB, stdin string, args ...string) (int, string, string) {
	t.Helper()
	var out, errOut bytes.Buffer
	code := run(context.Background(), append([]string{"calc"}, args...), strings.NewReader(stdin), &out, &errOut)
	return code, out.String(), errOut.String()
}

// table parses CSV output into rows of named cells.
func table(t *testing.T, out string) []map[string]string {
	t.Helper()
	recs, err := csv.NewReader(strings.NewReader(out)).ReadAll()
	require.NoError(t, err)
	require.NotEmpty(t, recs)
	var rows []map[string]string
	for _, rec := range recs[1:] {
		m := map[string]string{}
		for i, name := range recs[0] {
			m[name] = rec[i]
		}
		rows = append(rows, m)
	}
	return rows
}

func num(t *testing.T, s string) float64 {
	t.Helper()
	v, err := strconv.ParseFloat(s, 64)
	require.NoError(t, err, "cell %q", s)
	return v
}

func golden(t *testing.T, name, got string) {
	t.Helper()
	path := filepath.Join("..", "..", "testdata", "calc", "golden", name)
	if *update {
		require.NoError(t, os.WriteFile(path, []byte(got), 0o644))
	}
	want, err := os.ReadFile(path)
	require.NoError(t, err, "run go test ./cmd/etpulse -run TestCalcGolden -update to create it")
	assert.Equal(t, string(want), got, "output differs from %s; if the change is intended, rerun with -update and review the diff", path)
}

// TestCalcGolden is a regression test: the bundled example's output must
// not change unnoticed. The golden files are our own output, not check
// values; the checks against published values are TestCalcFAO56Example19
// and the tests of package hourly.
func TestCalcGolden(t *testing.T) {
	for _, tc := range []struct {
		golden string
		extra  []string
	}{
		{"halcyon-terrace-short.csv", nil},
		{"halcyon-terrace-tall-full.csv", []string{"--reference", "tall", "--clear-sky", "full"}},
		{"halcyon-terrace-fao56.csv", []string{"--reference", "fao56"}},
		{"halcyon-terrace-daily.csv", []string{"--daily"}},
	} {
		t.Run(tc.golden, func(t *testing.T) {
			code, out, errOut := calc(t, "", append(append([]string{"--in", demoFile}, demoArgs...), tc.extra...)...)
			require.Equal(t, exitOK, code, errOut)
			assert.Empty(t, errOut)
			golden(t, tc.golden, out)
		})
	}
}

// TestCalcPlausible checks the bundled example against what any irrigator
// expects of a hot, clear Mediterranean July (common practice, no source):
// night hours about zero, midday hours a few tenths of a mm, daily totals of
// several mm, and the sum of the hours close to the daily equation.
func TestCalcPlausible(t *testing.T) {
	code, out, errOut := calc(t, "", append([]string{"--in", demoFile}, demoArgs...)...)
	require.Equal(t, exitOK, code, errOut)
	rows := table(t, out)
	require.Len(t, rows, 96)
	for _, r := range rows {
		et := num(t, r["et_mm"])
		hour := r["time"][11:13]
		switch {
		case r["day"] == "0":
			assert.InDelta(t, 0, et, 0.07, "night hour %s", r["time"])
			assert.LessOrEqual(t, num(t, r["rn_mj_m2"]), 0.0, "night hour %s", r["time"])
		case hour >= "11" && hour <= "14" && r["time"][:10] != "2026-07-16": // the 16th has a storm
			assert.Greater(t, et, 0.4, "midday hour %s", r["time"])
			assert.Less(t, et, 1.0, "midday hour %s", r["time"])
		}
		assert.GreaterOrEqual(t, num(t, r["es_kpa"]), num(t, r["ea_kpa"]), r["time"])
	}

	code, out, errOut = calc(t, "", append([]string{"--in", demoFile, "--daily"}, demoArgs...)...)
	require.Equal(t, exitOK, code, errOut)
	days := table(t, out)
	require.Len(t, days, 4)
	for _, d := range days {
		sum, daily := num(t, d["et_mm"]), num(t, d["et_daily_mm"])
		assert.Equal(t, "24", d["hours"])
		assert.Greater(t, sum, 4.0, d["date"])
		assert.Less(t, sum, 9.0, d["date"])
		// Sum of the hours vs the daily equation from the day's aggregates:
		// within 10 % (common practice, no source).
		assert.InEpsilon(t, daily, sum, 0.10, d["date"])
	}
	assert.Equal(t, "9.50", days[2]["rain_mm"], "rain is summed per day")
}

// TestCalcFAO56Example19 reproduces FAO-56 Example 19 (hourly ETo at
// N'Diaye, Senegal, 1 October; all values from memory, published to the
// rounding shown) through the whole command: CSV in, CSV out. The example's
// station is at 16°13' N (16.2167), 16°15' W (--lon -16.25), 8 m, with Lz =
// 15° (standard time UTC-1). Rs = 2.450 MJ m-2 h-1 is written as mean W m-2:
// 2.450 / 0.0036 = 680.5556.
//
// The night hour follows the day hour after a gap, so the night cloudiness
// carry restarts and the 0.8 Rs/Rso default applies, which is exactly what
// the example assumes for the night (fcd = 1.35 x 0.8 - 0.35 = 0.73).
func TestCalcFAO56Example19(t *testing.T) {
	in := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n" +
		"2026-10-01T14:00,38,52,3.3,680.5556\n" +
		"2026-10-02T02:00,28,90,1.9,0\n"
	code, out, errOut := calc(t, in, "--lat", "16.2167", "--lon", "-16.25", "--elevation", "8", "--utc-offset", "-1", "--reference", "fao56")
	require.Equal(t, exitOK, code, errOut)
	assert.Contains(t, errOut, "line 3: 11 hours missing before 2026-10-02T02:00")
	rows := table(t, out)
	require.Len(t, rows, 2)

	day, night := rows[0], rows[1]
	assert.Equal(t, "2026-10-01T14:00", day["time"])
	assert.Equal(t, "1", day["day"])
	checkCells(t, day, []published{
		{"es_kpa", 6.625, 0.0005},    // FAO-56 Example 19: e°(38) = 6.625 kPa
		{"ea_kpa", 3.445, 0.0005},    // FAO-56 Example 19: ea = 6.625 x 0.52 = 3.445 kPa
		{"ra_mj_m2", 3.543, 0.0005},  // FAO-56 Example 19: Ra = 3.543 MJ m-2 h-1
		{"rso_mj_m2", 2.658, 0.0005}, // FAO-56 Example 19: Rso = 0.75 Ra = 2.658
		{"rn_mj_m2", 1.749, 0.0005},  // FAO-56 Example 19: Rn = 1.887 - 0.137 = 1.749
		{"g_mj_m2", 0.175, 0.0005},   // FAO-56 Example 19: G = 0.1 Rn = 0.175
		{"et_mm", 0.63, 0.005},       // FAO-56 Example 19: ETo = 0.63 mm/hour
	})

	assert.Equal(t, "2026-10-02T02:00", night["time"])
	assert.Equal(t, "0", night["day"])
	checkCells(t, night, []published{
		{"es_kpa", 3.780, 0.0005},    // FAO-56 Example 19: e°(28) = 3.780 kPa
		{"ea_kpa", 3.402, 0.0005},    // FAO-56 Example 19: ea = 3.780 x 0.90 = 3.402 kPa
		{"ra_mj_m2", 0, 0},           // FAO-56 Example 19: sun below the horizon, Ra = 0
		{"fcd", 0.73, 0.0005},        // FAO-56 Example 19 assumes Rs/Rso = 0.8 at night
		{"rn_mj_m2", -0.100, 0.0005}, // FAO-56 Example 19: Rn = 0 - 0.100 = -0.100
		{"g_mj_m2", -0.050, 0.0005},  // FAO-56 Example 19: G = 0.5 Rn = -0.050
		{"et_mm", 0.00, 0.005},       // FAO-56 Example 19: ETo = 0.00 mm/hour
	})
}

// published is one published value of an output column, with the
// tolerance of its published rounding.
type published struct {
	col  string
	want float64
	tol  float64
}

func checkCells(t *testing.T, row map[string]string, checks []published) {
	t.Helper()
	for _, c := range checks {
		assert.InDelta(t, c.want, num(t, row[c.col]), c.tol, "%s %s", row["time"], c.col)
	}
}

func TestCalcStdinAndRFC3339(t *testing.T) {
	// The same FAO-56 Example 19 day hour given in UTC: 15:00Z is 14:00 at UTC-1.
	in := "solar_w_m2,wind_m_s,rh_pct,air_temp_c,time\n680.5556,3.3,52,38,2026-10-01T15:00:00Z\n"
	code, out, errOut := calc(t, in, "--lat", "16.2167", "--lon", "-16.25", "--elevation", "8", "--utc-offset", "-1", "--reference", "fao56")
	require.Equal(t, exitOK, code, errOut)
	rows := table(t, out)
	require.Len(t, rows, 1)
	assert.Equal(t, "2026-10-01T14:00", rows[0]["time"])
	assert.Equal(t, "0.6269", rows[0]["et_mm"])
}

func TestCalcUsageErrors(t *testing.T) {
	station := []string{"--lat", "37.48", "--lon", "14.06", "--elevation", "310", "--utc-offset", "1"}
	without := func(flag string) []string {
		var out []string
		for i := 0; i < len(station); i += 2 {
			if station[i] != flag {
				out = append(out, station[i], station[i+1])
			}
		}
		return out
	}
	for _, tc := range []struct {
		name string
		args []string
		want string
	}{
		{"no lat", without("--lat"), "etpulse calc: missing --lat (station latitude, degrees north positive)"},
		{"no lon", without("--lon"), "etpulse calc: missing --lon (station longitude, degrees east positive)"},
		{"no elevation", without("--elevation"), "etpulse calc: missing --elevation (station elevation, m)"},
		{"no utc offset", without("--utc-offset"), "etpulse calc: missing --utc-offset (UTC offset of the station's standard time, hours)"},
		{"lat range", append(station, "--lat", "91"), "etpulse calc: --lat: 91 outside -90..90 degrees"},
		{"lon range", append(station, "--lon", "-200"), "etpulse calc: --lon: -200 outside -180..180 degrees (east positive)"},
		{"elevation range", append(station, "--elevation", "12000"), "etpulse calc: --elevation: 12000 outside -500..9000 m"},
		{"utc offset range", append(station, "--utc-offset", "15"), "etpulse calc: --utc-offset: 15 outside -12..14 hours"},
		{"utc offset below civil range", append(station, "--utc-offset", "-13"), "etpulse calc: --utc-offset: -13 outside -12..14 hours"},
		{"utc offset quarter", append(station, "--utc-offset", "5.1"), "etpulse calc: --utc-offset: 5.1 is not a whole number of quarter hours"},
		{"lat not a number", append(station, "--lat", "north"), `etpulse calc: invalid value "north" for flag -lat: parse error`},
		{"reference", append(station, "--reference", "grass"), `etpulse calc: --reference: "grass" is not one of short, tall, fao56`},
		{"clear sky", append(station, "--clear-sky", "fancy"), `etpulse calc: --clear-sky: "fancy" is not one of simple, full`},
		{"wind height", append(station, "--wind-height", "0"), "etpulse calc: --wind-height: 0 m outside 0.5..100"},
		{"turbidity without full", append(station, "--turbidity", "0.8"), "etpulse calc: --turbidity applies only with --clear-sky full"},
		{"turbidity range", append(station, "--clear-sky", "full", "--turbidity", "2"), "etpulse calc: --turbidity: 2 outside 0.5..1"},
		{"unknown flag", append(station, "--latitude", "3"), "etpulse calc: flag provided but not defined: -latitude"},
		{"positional", append(station, "weather.csv"), `etpulse calc: unexpected argument "weather.csv" (the input file goes after --in)`},
	} {
		t.Run(tc.name, func(t *testing.T) {
			code, out, errOut := calc(t, "", tc.args...)
			assert.Equal(t, exitUsage, code)
			assert.Empty(t, out)
			assert.Equal(t, tc.want+"\nrun 'etpulse calc --help' for usage\n", errOut)
		})
	}
}

func TestCalcHelp(t *testing.T) {
	code, out, errOut := calc(t, "", "--help")
	assert.Equal(t, exitOK, code)
	assert.Empty(t, errOut)
	for _, flag := range []string{"--in", "--lat", "--lon", "--elevation", "--utc-offset", "--reference", "--wind-height",
		"--clear-sky", "--turbidity", "--daily", "--skip-bad", "--help"} {
		assert.Contains(t, out, "  "+flag+" ", "help documents %s", flag)
	}
	for _, col := range hourcsv.Columns {
		assert.Contains(t, out, col, "help documents input column %s", col)
	}
	for _, col := range append(hourcsv.HourColumns, hourcsv.DayColumns...) {
		assert.Contains(t, out, col, "help documents output column %s", col)
	}
	assert.Contains(t, out, "etpulse calc --in testdata/calc/halcyon-terrace.csv")
}

// TestCalcHelpExampleRuns runs the example printed by --help.
func TestCalcHelpExampleRuns(t *testing.T) {
	_, help, _ := calc(t, "", "--help")
	i := strings.Index(help, "etpulse calc --in ")
	require.GreaterOrEqual(t, i, 0)
	example := strings.ReplaceAll(help[i:], "\\\n", " ")
	fields := strings.Fields(strings.SplitN(example, "\n", 2)[0])[2:]
	for j, f := range fields {
		if f == "testdata/calc/halcyon-terrace.csv" {
			fields[j] = demoFile
		}
	}
	code, out, errOut := calc(t, "", fields...)
	require.Equal(t, exitOK, code, errOut)
	assert.Len(t, table(t, out), 96)
}

func TestCalcDataErrors(t *testing.T) {
	station := []string{"--lat", "37.48", "--lon", "14.06", "--elevation", "310", "--utc-offset", "1"}
	const head = "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n"
	for _, tc := range []struct {
		name, in, want string
		rows           int // hour lines written before the error
	}{
		{"unknown column", "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2,leaf_wet\n",
			`etpulse calc: read weather csv: bad header: line 1: unknown column "leaf_wet" (accepted: time, air_temp_c, rh_pct, dew_point_c, ea_kpa, wind_m_s, wind_2m_m_s, solar_w_m2, net_rad_w_m2, soil_heat_w_m2, rain_mm)`, -1},
		{"missing column", "time,air_temp_c,rh_pct,wind_m_s\n",
			`etpulse calc: read weather csv: bad header: line 1: missing required column "solar_w_m2"`, -1},
		{"bad number", head + "2026-07-14T12:00,31,40,2,900\n2026-07-14T13:00,31,40,2,9OO\n",
			`etpulse calc: line 3: column solar_w_m2: value "9OO": not a number`, 1},
		{"temperature", head + "2026-07-14T12:00,71,40,2,900\n",
			`etpulse calc: line 2: column air_temp_c: value "71": outside -90..65 degC: bad input`, 0},
		{"engine refuses", "time,air_temp_c,ea_kpa,wind_m_s,solar_w_m2\n2026-07-14T12:00,20,3.1,2,900\n",
			`etpulse calc: line 2: compute: actual vapour pressure: 3.1 kPa exceeds saturation 2.338 kPa at 20 degC: bad input`, 0},
		{"backwards", head + "2026-07-14T12:00,31,40,2,900\n2026-07-14T11:00,31,40,2,900\n",
			`etpulse calc: line 3: column time: value "2026-07-14T11:00": not after the previous hour 2026-07-14T12:00 (line 2): hours must be in increasing order without repeats`, 1},
		{"empty input", "", "etpulse calc: read weather csv: bad header: empty input, expected a header line naming the columns", -1},
	} {
		t.Run(tc.name, func(t *testing.T) {
			code, out, errOut := calc(t, tc.in, station...)
			assert.Equal(t, exitError, code)
			assert.Equal(t, tc.want+"\n", errOut)
			if tc.rows < 0 {
				assert.Empty(t, out)
			} else {
				assert.Len(t, table(t, out), tc.rows, "hours before the bad row are still written")
			}
		})
	}

	code, _, errOut := calc(t, "", append(station, "--in", filepath.Join(t.TempDir(), "nope.csv"))...)
	assert.Equal(t, exitError, code)
	assert.Contains(t, errOut, "nope.csv: no such file or directory")
}

func TestCalcSkipBad(t *testing.T) {
	in := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n" +
		"2026-07-14T10:00,27,50,2,850\n" +
		"2026-07-14T11:00,abc,50,2,900\n" +
		"2026-07-14T12:00,31,40,2,950\n" +
		"2026-07-14T13:00,31,240,2,950\n" +
		"2026-07-14T14:00,31,40\n" +
		"2026-07-14T16:00,33,35,3,700\n"
	args := []string{"--lat", "37.48", "--lon", "14.06", "--elevation", "310", "--utc-offset", "1", "--skip-bad"}
	code, out, errOut := calc(t, in, args...)
	require.Equal(t, exitOK, code, errOut)
	rows := table(t, out)
	require.Len(t, rows, 3)
	assert.Equal(t, "2026-07-14T10:00", rows[0]["time"])
	assert.Equal(t, "2026-07-14T12:00", rows[1]["time"])
	assert.Equal(t, "2026-07-14T16:00", rows[2]["time"])
	assert.Equal(t, `etpulse calc: skipped line 3: column air_temp_c: value "abc": not a number
etpulse calc: line 4: 1 hour missing before 2026-07-14T12:00
etpulse calc: skipped line 5: column rh_pct: value "240": relative humidity: 240 % outside 0..100: bad input
etpulse calc: skipped line 6: has 3 fields, the header has 5
etpulse calc: line 7: 3 hours missing before 2026-07-14T16:00
etpulse calc: 3 hours computed, 3 bad rows skipped, 2 gaps
`, errOut)

	code, out, errOut = calc(t, "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n2026-07-14T10:00,x,50,2,850\n", args...)
	assert.Equal(t, exitError, code, "nothing computed")
	assert.Len(t, table(t, out), 0)
	assert.Equal(t, `etpulse calc: skipped line 2: column air_temp_c: value "x": not a number
etpulse calc: 0 hours computed, 1 bad row skipped, 0 gaps
etpulse calc: no row could be computed
`, errOut)

	code, _, errOut = calc(t, in, args[:len(args)-1]...)
	assert.Equal(t, exitError, code)
	assert.Equal(t, "etpulse calc: line 3: column air_temp_c: value \"abc\": not a number\n", errOut)
}

// TestCalcGapRestartsCarry: after a gap the night hour must not use the
// cloudiness of the last sunny hour before the gap; it uses the default.
func TestCalcGapRestartsCarry(t *testing.T) {
	station := []string{"--lat", "37.48", "--lon", "14.06", "--elevation", "310", "--utc-offset", "1"}
	// A heavily overcast afternoon (low fcd), then the night.
	contiguous := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n" +
		"2026-07-14T15:00,25,70,2,120\n" +
		"2026-07-14T16:00,24,72,2,100\n" +
		"2026-07-14T22:00,20,80,1,0\n"
	code, out, errOut := calc(t, contiguous, station...)
	require.Equal(t, exitOK, code, errOut)
	rows := table(t, out)
	require.Len(t, rows, 3)
	assert.Equal(t, "0.730", rows[2]["fcd"], "after the gap the default Rs/Rso 0.8 applies")

	withoutGap := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n" +
		"2026-07-14T15:00,25,70,2,120\n" +
		"2026-07-14T16:00,24,72,2,100\n"
	for h := 17; h <= 22; h++ {
		withoutGap += "2026-07-14T" + strconv.Itoa(h) + ":00,20,80,1,0\n"
	}
	code, out, errOut = calc(t, withoutGap, station...)
	require.Equal(t, exitOK, code, errOut)
	rows = table(t, out)
	require.Len(t, rows, 8)
	assert.Equal(t, rows[1]["fcd"], rows[7]["fcd"], "without a gap the last sunny hour's fcd is carried")
	assert.NotEqual(t, "0.730", rows[7]["fcd"])
}

// BenchmarkCalc runs `etpulse calc` over ten years of generated hourly
// weather (87,600 rows) and reports rows/s by the wall clock and, because
// the machine may be shared, also by the process CPU time (cpu-rows/s; the
// garbage collector's background work counts there too). Target: >= 500,000
// rows/s.
func BenchmarkCalc(b *testing.B) {
	data := string(hourcsv.SyntheticYears(2026, 10))
	rows := strings.Count(data, "\n") - 1
	var out, errOut bytes.Buffer
	out.Grow(8 << 20)
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	cpu0 := loadgen.ProcessCPU()
	for b.Loop() {
		out.Reset()
		errOut.Reset()
		if code := run(context.Background(), append([]string{"calc"}, demoArgs...), strings.NewReader(data), &out, &errOut); code != exitOK {
			b.Fatalf("exit %d: %s", code, errOut.String())
		}
	}
	cpu := loadgen.ProcessCPU() - cpu0
	if n := bytes.Count(out.Bytes(), []byte{'\n'}) - 1; n != rows {
		b.Fatalf("wrote %d rows, want %d", n, rows)
	}
	b.ReportMetric(float64(rows)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
	if cpu > 0 {
		b.ReportMetric(float64(rows)*float64(b.N)/cpu.Seconds(), "cpu-rows/s")
	}
}

// TestReadmeCalcExample keeps the README's calc example true: the command
// it shows runs, and the output line it shows is what the command prints.
func TestReadmeCalcExample(t *testing.T) {
	readme, err := os.ReadFile("../../README.md")
	require.NoError(t, err)
	text := string(readme)
	start := strings.Index(text, "## Compute ET from a weather file")
	require.GreaterOrEqual(t, start, 0, "README has the calc section")
	text = text[start:]
	if end := strings.Index(text[3:], "\n## "); end >= 0 {
		text = text[:end+3]
	}
	i := strings.Index(text, "go run ./cmd/etpulse calc ")
	require.GreaterOrEqual(t, i, 0, "README shows a calc command")
	cmdLine := strings.SplitN(strings.ReplaceAll(text[i:], "\\\n", " "), "\n", 2)[0]
	args := strings.Fields(cmdLine)[4:]
	for j, a := range args {
		if strings.HasPrefix(a, "testdata/") {
			args[j] = "../../" + a
		}
	}
	code, out, errOut := calc(t, "", args...)
	require.Equal(t, exitOK, code, errOut)

	var shown []string
	for _, line := range strings.Split(text, "\n") {
		if strings.HasPrefix(line, "time,et_mm,") || strings.HasPrefix(line, "2026-") {
			shown = append(shown, line)
		}
	}
	require.NotEmpty(t, shown, "README shows output lines")
	for _, line := range shown {
		assert.Contains(t, out, line+"\n", "README output line")
	}
}

// TestCalcMinWindAndGreenhouse: --min-wind (default 0.5 m/s, FAO-56 ch. 4)
// raises calm hours and flags them; --min-wind 0 leaves them; the greenhouse
// form ignores the measured wind; bad values are usage errors.
func TestCalcMinWindAndGreenhouse(t *testing.T) {
	station := []string{"--lat", "37.48", "--lon", "14.06", "--elevation", "310", "--utc-offset", "1"}
	hour := func(wind string, args ...string) map[string]string {
		t.Helper()
		in := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n2026-07-14T12:00,31,40," + wind + ",900\n"
		code, out, errOut := calc(t, in, append(append([]string(nil), station...), args...)...)
		require.Equal(t, exitOK, code, errOut)
		rows := table(t, out)
		require.Len(t, rows, 1)
		return rows[0]
	}
	calm, half := hour("0.1"), hour("0.5")
	assert.Equal(t, "wind:floor", calm["flags"])
	assert.Equal(t, "", half["flags"])
	assert.Equal(t, half["et_mm"], calm["et_mm"], "0.1 m/s computes as 0.5 m/s")

	off := hour("0.1", "--min-wind", "0")
	assert.Equal(t, "", off["flags"])
	assert.NotEqual(t, half["et_mm"], off["et_mm"])

	assert.Equal(t, hour("0.1", "--inside-greenhouse")["et_mm"], hour("6", "--inside-greenhouse")["et_mm"], "the measured wind is not used inside")

	in := "time,air_temp_c,rh_pct,wind_m_s,solar_w_m2\n2026-07-14T12:00,31,40,1,900\n"
	code, _, errOut := calc(t, in, append(station, "--min-wind", "-1")...)
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errOut, "--min-wind: -1 m/s outside 0..2")
	code, _, errOut = calc(t, in, append(station, "--inside-greenhouse", "--reference", "tall")...)
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errOut, "--inside-greenhouse: the fixed-resistance form is for the grass references")
}

// TestCalcFlagLimits: each station flag accepts exactly the bounds hourly
// declares and refuses the next value outside them, and the help states
// the same bounds, so the flags cannot drift from the equations' limits.
func TestCalcFlagLimits(t *testing.T) {
	station := map[string]string{"--lat": "37.48", "--lon": "14.06", "--elevation": "310", "--utc-offset": "1"}
	args := func(flag string, v float64) []string {
		out := []string{flag, strconv.FormatFloat(v, 'g', -1, 64)}
		for f, d := range station {
			if f != flag {
				out = append(out, f, d)
			}
		}
		if flag == "--turbidity" {
			out = append(out, "--clear-sky", "full")
		}
		return out
	}
	_, help, _ := calc(t, "", "--help")
	for _, c := range []struct {
		flag   string
		lo, hi float64
	}{
		{"--lat", hourly.MinLatitude, hourly.MaxLatitude},
		{"--lon", hourly.MinLongitude, hourly.MaxLongitude},
		{"--elevation", hourly.MinElevation, hourly.MaxElevation},
		{"--utc-offset", hourly.MinUTCOffset, hourly.MaxUTCOffset},
		{"--wind-height", hourly.MinWindHeight, hourly.MaxWindHeight},
		{"--turbidity", hourly.MinTurbidity, hourly.MaxTurbidity},
		{"--min-wind", 0, hourly.MaxMinWind2},
	} {
		for _, v := range []float64{c.lo, c.hi} {
			code, _, errOut := calc(t, "", args(c.flag, v)...)
			assert.NotEqual(t, exitUsage, code, "%s %v is a bound: %s", c.flag, v, errOut)
		}
		for _, v := range []float64{math.Nextafter(c.lo, math.Inf(-1)), math.Nextafter(c.hi, math.Inf(1))} {
			code, _, errOut := calc(t, "", args(c.flag, v)...)
			assert.Equal(t, exitUsage, code, "%s %v is outside", c.flag, v)
			assert.Contains(t, errOut, "etpulse calc: "+c.flag+": ", "the message names the flag")
		}
		assert.Contains(t, help, fmt.Sprintf("%g..%g", c.lo, c.hi), "help states the %s bounds", c.flag)
	}
}
