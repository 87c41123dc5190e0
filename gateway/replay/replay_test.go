package replay

import (
	"bytes"
	"context"
	"encoding/csv"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/demo"
	"etpulse/hourly"
)

// readingsCSV writes the simulator's on-time samples as a readings CSV and
// returns them by station.
func readingsCSV(t *testing.T, msgs []demo.Message) (string, map[string][]hourly.Sample) {
	t.Helper()
	var b strings.Builder
	require.NoError(t, demo.WriteReadingsCSV(&b, msgs))
	bySt := map[string][]hourly.Sample{}
	for _, m := range msgs {
		if m.Kind == demo.Normal {
			for _, tr := range m.Samples {
				bySt[tr.Station] = append(bySt[tr.Station], tr.Sample)
			}
		}
	}
	return b.String(), bySt
}

func TestReplayMatchesDirectComputation(t *testing.T) {
	sim := demo.New(demo.Options{Seed: 5, Stations: []string{demo.Paddock, demo.Glasshouse}})
	start := sim.Start()
	msgs := sim.Generate(start, start.Add(24*time.Hour))
	cfg, err := sim.Config(demo.ConfigOptions{BrokerURL: "tcp://127.0.0.1:1883", ClientID: "replay-test", StatePath: "unused.db"})
	require.NoError(t, err)
	in, samples := readingsCSV(t, msgs)
	// A malformed row, an unknown station, a duplicate row and a bad unit.
	lines := strings.SplitN(in, "\n", 3)
	in = lines[0] + "\n" + lines[1] + "\n" + lines[1] + "\n" +
		"not-a-time,paddock,air_temp,20,degC\n" +
		"2026-01-11T14:00:00Z,nowhere,air_temp,20,degC\n" +
		"2026-01-11T14:00:00Z,paddock,air_temp,20,furlongs\n" + lines[2]

	var out, rowErrs bytes.Buffer
	sum, err := Run(context.Background(), cfg, strings.NewReader(in), &out, Options{RowErrors: &rowErrs})
	require.NoError(t, err)
	assert.Equal(t, 3, sum.BadRows)
	assert.Equal(t, 1, sum.Duplicates)
	assert.Contains(t, rowErrs.String(), `line 4: time: "not-a-time" is not an RFC 3339 time`)
	assert.Contains(t, rowErrs.String(), `line 5: station: "nowhere" is not in the configuration`)
	assert.Contains(t, rowErrs.String(), `line 6: air_temp: unit "furlongs" is not one of [degC degF K]`)
	assert.Equal(t, 48, sum.Records)

	rows, err := csv.NewReader(&out).ReadAll()
	require.NoError(t, err)
	require.Len(t, rows, 49)
	assert.Equal(t, Columns, rows[0])
	col := map[string]int{}
	for i, c := range Columns {
		col[c] = i
	}
	for _, id := range []string{demo.Paddock, demo.Glasshouse} {
		st := cfg.Sites[0].StationByID(id)
		var carry hourly.Carry
		n := 0
		for h := start; h.Before(start.Add(24 * time.Hour)); h = h.Add(time.Hour) {
			var hs []hourly.Sample
			for _, s := range samples[id] {
				if !s.Time.Before(h) && s.Time.Before(h.Add(time.Hour)) {
					hs = append(hs, s)
				}
			}
			a, err := hourly.AggregateHour(h, hs, hourly.AggregateOptions{WindHeight: st.WindHeight, MinCoverage: st.MinCoverage})
			require.NoError(t, err)
			require.Empty(t, a.Missing, "%s %s", id, h)
			r, c, err := hourly.Compute(st.HourlyStation(), st.Reference, a.Hour, carry)
			require.NoError(t, err)
			carry = c
			for _, row := range rows[1:] {
				if row[col["station"]] != id || row[col["start_utc"]] != h.Format(time.RFC3339) {
					continue
				}
				n++
				et, err := strconv.ParseFloat(row[col["et_mm"]], 64)
				require.NoError(t, err)
				assert.InDelta(t, r.ET, et, 0.00005, "%s %s", id, row[col["local_start"]])
				assert.Equal(t, "true", row[col["complete"]])
				assert.Equal(t, string(r.FcdSource), row[col["fcd_source"]])
			}
		}
		assert.Equal(t, 24, n, id)
	}
}
