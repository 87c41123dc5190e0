package main

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/report"
)

// exportRows runs `etpulse export --state path` over a wide range and
// returns its CSV rows as maps.
func exportRows(t *testing.T, path string, measurement string) []map[string]string {
	t.Helper()
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"export", "--state", path, "--from", "2000-01-01", "--to", "2100-01-01", "--measurement", measurement}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, errOut.String())
	return table(t, out.String())
}

// TestReportAgainstHandSummedDay runs the demo farm for one day, keeps its
// state, and checks `etpulse report` (read from the state file) against the
// day summed independently from `etpulse export`: each station's ET per
// reference is the sum of et_mm over the records whose local hour
// (local_start, written by the pipeline) falls on the day, its rain the
// sum of rain_mm, its hour counts the records' complete and filled marks;
// each zone's ETc is the sum of the day's zone steps and its depletion at
// the end the last step's. The demo farm is invented: this is a
// consistency check, not a check value. No published daily total exists
// for it; the hourly ET values behind the sums are checked against FAO-56
// Example 19 and ASCE-EWRI 2005 in hourly/ and gateway/pipeline.
func TestReportAgainstHandSummedDay(t *testing.T) {
	path := demoState(t)
	sim := demo.New(demo.Options{Seed: 3})
	cfgPath := filepath.Join(t.TempDir(), "farm.yaml")
	require.NoError(t, os.WriteFile(cfgPath, []byte(sim.ConfigYAML(demo.ConfigOptions{BrokerURL: "tcp://127.0.0.1:1883", ClientID: "report-test", StatePath: path})), 0o600))
	cfg, err := config.Load(cfgPath)
	require.NoError(t, err)
	// The demo's first day, local to its stations (they share one offset).
	date := sim.Start().In(time.FixedZone("", int(cfg.Sites[0].Stations[0].UTCOffset*3600))).Format(time.DateOnly)

	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"report", "--config", cfgPath, "--date", date, "--format", "json"}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, errOut.String())
	assert.Contains(t, errOut.String(), "reading the state file")
	var rep report.Report
	require.NoError(t, json.Unmarshal(out.Bytes(), &rep), out.String())
	assert.Equal(t, date, rep.Date)
	require.Len(t, rep.Stations, len(cfg.Sites[0].Stations))

	type sums struct {
		et               map[string]float64
		rain             float64
		complete, filled int
	}
	want := map[string]*sums{}
	seen := map[string]bool{} // station/hour: rain and marks counted once
	for _, r := range exportRows(t, path, "et_hour") {
		if !strings.HasPrefix(r["local_start"], date+"T") {
			continue
		}
		s := want[r["station"]]
		if s == nil {
			s = &sums{et: map[string]float64{}}
			want[r["station"]] = s
		}
		if r["et_mm"] != "" {
			s.et[r["reference"]] += num(t, r["et_mm"])
		}
		if k := r["station"] + r["time"]; !seen[k] {
			seen[k] = true
			s.rain += num(t, r["rain_mm"])
			switch {
			case r["filled"] == "true":
				s.filled++
			case r["complete"] == "true":
				s.complete++
			}
		}
	}
	for _, st := range rep.Stations {
		w := want[st.Station]
		require.NotNil(t, w, st.Station)
		require.NotEmpty(t, st.ET, st.Station)
		for _, e := range st.ET {
			assert.InDelta(t, w.et[e.Reference], e.MM, 0.005, "%s %s: the report's ET is the sum of the day's hours (rounded to 0.01 mm)", st.Station, e.Label)
			assert.Greater(t, e.MM, 0.0)
		}
		assert.InDelta(t, w.rain, st.RainMM, 0.005, st.Station)
		assert.Equal(t, w.complete, st.HoursComplete, st.Station)
		assert.Equal(t, w.filled, st.HoursFilled, st.Station)
		assert.Equal(t, 24, st.HoursComplete+st.HoursFilled+st.HoursMissing)
	}

	require.Len(t, rep.Zones, len(cfg.Sites[0].Zones))
	steps := exportRows(t, path, "zone_step")
	for _, z := range rep.Zones {
		off := cfg.Sites[0].StationByID(z.Station).UTCOffset
		from, _ := time.Parse(time.DateOnly, date)
		from = from.Add(-time.Duration(off * float64(time.Hour)))
		to := from.Add(24 * time.Hour)
		var etc float64
		var last, before string
		for _, r := range steps {
			if r["zone"] != z.Zone {
				continue
			}
			tm, err := time.Parse(time.RFC3339, r["time"])
			require.NoError(t, err)
			switch {
			case tm.Before(from):
				before = r["depletion_mm"]
			case tm.Before(to):
				etc += num(t, r["etc_mm"])
				last = r["depletion_mm"]
			}
		}
		assert.InDelta(t, etc, z.ETcMM, 0.005, "%s: ETc is the sum of the day's steps", z.Zone)
		require.NotNil(t, z.DepletionEndMM, z.Zone)
		assert.InDelta(t, num(t, last), *z.DepletionEndMM, 0.05, z.Zone)
		if before == "" {
			assert.Nil(t, z.DepletionStartMM, "%s: no step before the demo's first day", z.Zone)
		}
	}

	for _, format := range []string{"text", "csv"} {
		out.Reset()
		errOut.Reset()
		require.Equal(t, exitOK, run(context.Background(), []string{"report", "--config", cfgPath, "--date", date, "--format", format}, nil, &out, &errOut), errOut.String())
		for _, st := range rep.Stations {
			assert.Contains(t, out.String(), st.Station, format)
		}
	}
}

// TestReportBadInput: a bad date, format or site is refused with exit 2,
// naming the flag and the fix.
func TestReportBadInput(t *testing.T) {
	sim := demo.New(demo.Options{Seed: 3})
	cfgPath := filepath.Join(t.TempDir(), "farm.yaml")
	require.NoError(t, os.WriteFile(cfgPath, []byte(sim.ConfigYAML(demo.ConfigOptions{BrokerURL: "tcp://127.0.0.1:1883", ClientID: "report-test", StatePath: filepath.Join(t.TempDir(), "none.db")})), 0o600))
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"--date", "12/01/2026"}, `--date: "12/01/2026" is not a date; give YYYY-MM-DD`},
		{[]string{"--format", "xml"}, `--format: must be one of text, csv, json, got "xml"`},
		{nil, configForms},
	} {
		args := append([]string{"report"}, tc.args...)
		if tc.args != nil {
			args = append(args, "--config", cfgPath)
		}
		var out, errOut bytes.Buffer
		assert.Equal(t, exitUsage, run(context.Background(), args, nil, &out, &errOut), "%v", tc.args)
		assert.Contains(t, errOut.String(), tc.want)
	}
}
