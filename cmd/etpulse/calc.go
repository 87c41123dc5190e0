package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"strings"

	"golang.org/x/term"

	"etpulse/gateway/config"
	"etpulse/gateway/hourcsv"
	"etpulse/hourly"
)

// calcHelp is the text of 'etpulse calc --help'; the flag bounds are
// hourly's, filled in by calcHelpBounds.
var calcHelp = calcHelpBounds.Replace(`usage: etpulse calc --lat DEG --lon DEG --elevation M --utc-offset H [flags] [--in FILE]

Computes hourly Penman-Monteith reference ET from an hourly weather CSV
(stdin, or --in FILE) and writes a results CSV to stdout. Messages about gaps
and skipped rows go to stderr.

Station (all four required):
  --lat DEG          latitude, degrees, north positive ({lat})
  --lon DEG          longitude, degrees, EAST positive ({lon}); 16.25 W is -16.25
  --elevation M      elevation above sea level, m ({elevation})
  --utc-offset H     UTC offset of the station's STANDARD time, hours ({utc-offset},
                     e.g. -8; no daylight-saving time: solar geometry uses
                     standard time)

Method:
  --reference REF    short (ASCE-EWRI 2005 standardized ETos, default),
                     tall (ASCE-EWRI 2005 ETrs) or fao56 (FAO-56 hourly grass)
  --wind-height M    height of the wind sensor, m (default 2; other heights
                     are adjusted to 2 m by FAO-56 eq. 47; {wind-height})
  --clear-sky FORM   clear-sky radiation: simple (FAO-56 eq. 37, default) or
                     full (ASCE-EWRI 2005 Appendix D, with precipitable water)
  --turbidity KT     turbidity for --clear-sky full ({turbidity}): 1 clean air
                     (default), 0.5 extremely turbid
  --min-wind U       lower limit of the 2 m wind speed in the equation, m/s
                     ({min-wind}; default 0.5, as FAO-56 advises for calm air; 0 turns
                     it off); hours where it applied are flagged wind:floor
  --inside-greenhouse
                     the station stands inside a greenhouse: the reference
                     uses a fixed aerodynamic resistance of 295 s/m instead
                     of the measured wind (short and fao56 only)

Input and output:
  --in FILE          weather CSV (default: stdin)
  --daily            one line per local date instead of one per hour
  --skip-bad         report bad rows on stderr and go on (default: stop at the
                     first bad row, exit 1)
  --help             this text

Input columns, named in a header line, in any order ('#' starts a comment line):
  time           hour START in station standard time, 2026-07-01T14:00, or
                 RFC 3339 with an offset (2026-07-01T22:00:00Z), which is
                 converted to station standard time. One row per hour, in
                 increasing order; a missing hour is reported on stderr (the
                 night cloudiness carry survives it only when no hour with
                 the sun above 0.3 rad was missed); a repeated or earlier
                 time is a bad row.
  air_temp_c     mean air temperature, degC
  exactly one of:
    rh_pct       mean relative humidity, %  (ea from this row's RH and air
                 temperature, FAO-56 eq. 54)
    dew_point_c  mean dew point, degC       (ea = e°(Tdew), FAO-56 eq. 14)
    ea_kpa       actual vapour pressure, kPa
  wind_m_s       mean wind speed at --wind-height, m/s
  wind_2m_m_s    instead of wind_m_s: mean wind speed at 2 m, m/s (only with
                 --wind-height 2)
  solar_w_m2     mean incoming solar radiation over the hour, W/m2
  optional (an empty cell means "not measured this hour"):
    net_rad_w_m2   measured net radiation, mean W/m2 (replaces the estimate)
    soil_heat_w_m2 measured soil heat flux, mean W/m2, positive into the soil
                   (replaces G = 0.1/0.5 Rn short, 0.04/0.2 Rn tall)
    rain_mm        rain over the hour, mm (summed by --daily)
  The old names wind_ms, solar_wm2, net_rad_wm2,
  soil_heat_wm2 and dewpoint_c are still read, with one line on stderr per
  old name; a header with both the old and the new name of one quantity is
  refused.

Output columns (hourly):
  time      hour start, station standard time
  et_mm     reference ET over the hour, mm (can be slightly negative at
            night: dew)
  ra_mj_m2  extraterrestrial radiation, MJ/m2
  rso_mj_m2 clear-sky radiation, MJ/m2
  fcd       cloudiness function (night: carried from the last hour with the
            sun above 0.3 rad before this night, at most 18 h old; else the
            0.8 Rs/Rso default, flagged)
  rn_mj_m2  net radiation, MJ/m2
  g_mj_m2   soil heat flux, MJ/m2
  es_kpa    saturation vapour pressure, kPa
  ea_kpa    actual vapour pressure, kPa
  day       1 when Rn > 0 (daytime constants), else 0
  flags     space-separated, as in the live records: fcd:default,
            fcd:carry-expired, wind:floor

Output columns (--daily):
  date, hours (computed hours of the date), et_mm (sum of hourly ET),
  et_daily_mm (daily equation, FAO-56 eq. 6 / ASCE-EWRI 2005, from the
  day's aggregates; empty unless all 24 hours are present), rain_mm (empty
  without rain values), solar_mj_m2, rn_mj_m2 (sums), air_temp_min_c,
  air_temp_max_c (of the hourly means), ea_kpa, wind_2m_m_s (means)

Exit status: 0 success (also when --skip-bad skipped some rows), 1 bad data
(or every row skipped) or unreadable input, 2 bad command line.

Example (the bundled demo orchard, invented data; wind measured at 3 m):
  etpulse calc --in testdata/calc/halcyon-terrace.csv \
    --lat 37.48 --lon 14.06 --elevation 310 --utc-offset 1 --wind-height 3
`)

// calcHelpBounds puts hourly's station bounds into the help text.
var calcHelpBounds = strings.NewReplacer(
	"{lat}", span(hourly.MinLatitude, hourly.MaxLatitude),
	"{lon}", span(hourly.MinLongitude, hourly.MaxLongitude),
	"{elevation}", span(hourly.MinElevation, hourly.MaxElevation),
	"{utc-offset}", span(hourly.MinUTCOffset, hourly.MaxUTCOffset),
	"{wind-height}", span(hourly.MinWindHeight, hourly.MaxWindHeight),
	"{turbidity}", span(hourly.MinTurbidity, hourly.MaxTurbidity),
	"{min-wind}", span(0, hourly.MaxMinWind2),
)

// span prints a closed range as the messages and the help write it: "lo..hi".
func span(lo, hi float64) string { return fmt.Sprintf("%g..%g", lo, hi) }

func runCalc(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("calc", flag.ContinueOnError)
	fs.SetOutput(io.Discard)
	var (
		in         = fs.String("in", "", "")
		lat        = fs.Float64("lat", math.NaN(), "")
		lon        = fs.Float64("lon", math.NaN(), "")
		elevation  = fs.Float64("elevation", math.NaN(), "")
		utcOffset  = fs.Float64("utc-offset", math.NaN(), "")
		reference  = fs.String("reference", string(hourly.Short), "")
		windHeight = fs.Float64("wind-height", 2, "")
		clearSky   = fs.String("clear-sky", string(hourly.ClearSkySimple), "")
		turbidity  = fs.Float64("turbidity", 1, "")
		minWind    = fs.Float64("min-wind", hourly.DefaultMinWind2, "")
		greenhouse = fs.Bool("inside-greenhouse", false, "")
		daily      = fs.Bool("daily", false, "")
		skipBad    = fs.Bool("skip-bad", false, "")
	)
	usageErr := func(format string, a ...any) int {
		fmt.Fprintf(stderr, "etpulse calc: "+format+"\n", a...)
		fmt.Fprintln(stderr, "run 'etpulse calc --help' for usage")
		return exitUsage
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			fmt.Fprint(stdout, calcHelp)
			return exitOK
		}
		return usageErr("%v", err)
	}
	if fs.NArg() > 0 {
		return usageErr("unexpected argument %q (the input file goes after --in)", fs.Arg(0))
	}
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	for _, req := range []struct{ name, what string }{
		{"lat", "station latitude, degrees north positive"},
		{"lon", "station longitude, degrees east positive"},
		{"elevation", "station elevation, m"},
		{"utc-offset", "UTC offset of the station's standard time, hours"},
	} {
		if !set[req.name] {
			return usageErr("missing --%s (%s)", req.name, req.what)
		}
	}
	ref, err := hourly.ParseReference(*reference)
	if err != nil {
		return usageErr("--reference: %q is not one of short, tall, fao56", *reference)
	}
	cs, err := hourly.ParseClearSky(*clearSky)
	if err != nil {
		return usageErr("--clear-sky: %q is not one of simple, full", *clearSky)
	}
	if set["turbidity"] && cs != hourly.ClearSkyFull {
		return usageErr("--turbidity applies only with --clear-sky full")
	}
	if !(*turbidity >= hourly.MinTurbidity && *turbidity <= hourly.MaxTurbidity) {
		return usageErr("--turbidity: %v outside %s", *turbidity, span(hourly.MinTurbidity, hourly.MaxTurbidity))
	}
	if _, err := hourly.WindFactor(*windHeight); err != nil {
		return usageErr("--wind-height: %v m outside %s", *windHeight, span(hourly.MinWindHeight, hourly.MaxWindHeight))
	}
	if !(*minWind >= 0 && *minWind <= hourly.MaxMinWind2) {
		return usageErr("--min-wind: %v m/s outside %s (FAO-56 advises 0.5; 0 turns it off)", *minWind, span(0, hourly.MaxMinWind2))
	}
	st := hourly.Station{Latitude: *lat, Longitude: *lon, Elevation: *elevation, UTCOffset: *utcOffset, ClearSky: cs, Turbidity: *turbidity, MinWind2: *minWind}
	if *greenhouse {
		if ref == hourly.Tall {
			return usageErr("--inside-greenhouse: the fixed-resistance form is for the grass references; use --reference short or fao56")
		}
		st.AeroResistance = hourly.GreenhouseResistance
	}
	for _, c := range []struct {
		name   string
		v      float64
		lo, hi float64
		unit   string
	}{
		{"lat", st.Latitude, hourly.MinLatitude, hourly.MaxLatitude, "degrees"},
		{"lon", st.Longitude, hourly.MinLongitude, hourly.MaxLongitude, "degrees (east positive)"},
		{"elevation", st.Elevation, hourly.MinElevation, hourly.MaxElevation, "m"},
		{"utc-offset", st.UTCOffset, hourly.MinUTCOffset, hourly.MaxUTCOffset, "hours"},
	} {
		if !(c.v >= c.lo && c.v <= c.hi) {
			return usageErr("--%s: %v outside %s %s", c.name, c.v, span(c.lo, c.hi), c.unit)
		}
	}
	if _, err := hourcsv.StandardZone(st.UTCOffset); err != nil {
		return usageErr("--utc-offset: %v is not a whole number of quarter hours", st.UTCOffset)
	}
	if err := st.Validate(); err != nil {
		return usageErr("%v", err)
	}
	if _, msg := config.PlaceTimeWarning(st.Longitude, st.UTCOffset, "--lon", "--utc-offset"); msg != "" {
		fmt.Fprintf(stderr, "etpulse calc: warning: %s\n", msg)
	}

	input := stdin
	if *in == "" || *in == "-" {
		if f, ok := stdin.(*os.File); ok && term.IsTerminal(int(f.Fd())) {
			fmt.Fprintln(stderr, "etpulse calc: reading the weather CSV from the terminal; end with Ctrl-D, or give --in FILE")
		}
	} else {
		f, err := os.Open(*in)
		if err != nil {
			fmt.Fprintf(stderr, "etpulse calc: %v\n", err)
			return exitError
		}
		defer f.Close() // read-only
		input = f
	}
	report := &prefixWriter{w: stderr, prefix: "etpulse calc: "}
	sum, err := hourcsv.Calc(ctx, input, stdout, hourcsv.CalcOptions{
		Station:    st,
		Reference:  ref,
		WindHeight: *windHeight,
		Daily:      *daily,
		SkipBad:    *skipBad,
		Report:     report,
	})
	if err != nil {
		fmt.Fprintf(stderr, "etpulse %v\n", err)
		return exitError
	}
	if sum.Skipped > 0 || sum.Gaps > 0 {
		fmt.Fprintf(stderr, "etpulse calc: %s computed, %s skipped, %s\n",
			count(sum.Hours, "hour", "hours"), count(sum.Skipped, "bad row", "bad rows"), count(sum.Gaps, "gap", "gaps"))
	}
	if sum.Hours == 0 && sum.Skipped > 0 {
		fmt.Fprintln(stderr, "etpulse calc: no row could be computed")
		return exitError
	}
	return exitOK
}

// prefixWriter writes each line it receives to w with a prefix.
type prefixWriter struct {
	w      io.Writer
	prefix string
}

func (p *prefixWriter) Write(b []byte) (int, error) {
	for _, line := range strings.SplitAfter(string(b), "\n") {
		if line == "" {
			continue
		}
		if _, err := io.WriteString(p.w, p.prefix+line); err != nil {
			return 0, err
		}
	}
	return len(b), nil
}
