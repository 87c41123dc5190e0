package store

import (
	"bytes"
	"fmt"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/internal/testenv"
	"go.etcd.io/bbolt"
)

// historyFixture fills a local-only history with two stations' hours (one
// revised), a zone step and a raw summary, and returns the points that the
// history must hold.
func historyFixture(t *testing.T, site string, start time.Time) (*Outbox, []Point) {
	db := openTestDB(t)
	o := openTestOutbox(t, db, OutboxOptions{LocalOnly: true, RawSummaries: true})
	var kept []Point
	for h := range 3 {
		for _, st := range []string{"north-mast", "creek-mast"} {
			rec := example19Record()
			rec.Site, rec.Station, rec.Start = site, st, start.Add(time.Duration(h)*time.Hour)
			rec.Revision = 0
			if h == 1 && st == "north-mast" {
				rec.Result.ET = 0.5
				enqueue(t, db, o, HourPoints(rec)...) // revision 0, replaced below
				rec.Revision, rec.Result.ET = 1, 0.61
			}
			require.NoError(t, db.Update(func(tx *bbolt.Tx) error { return o.HandleHour(tx, rec) }))
			kept = append(kept, HourPoints(rec)...)
		}
	}
	z := ZonePoint(site, "pear-3", start.Add(time.Hour), map[string]any{"depletion_mm": 8.5})
	enqueue(t, db, o, z)
	kept = append(kept, z)
	return o, kept
}

func TestExportCSV(t *testing.T) {
	start := time.Date(2023, 10, 2, 15, 0, 0, 0, time.UTC)
	o, _ := historyFixture(t, "kestrel-ridge", start)
	var b bytes.Buffer
	n, err := ExportCSV(&b, o.History(), Filter{From: start.Add(time.Hour), To: start.Add(3 * time.Hour), Station: "north-mast"})
	require.NoError(t, err)
	assert.Equal(t, 2, n)
	lines := strings.Split(strings.TrimSpace(b.String()), "\n")
	require.Len(t, lines, 3)
	header := strings.Split(lines[0], ",")
	assert.Equal(t, []string{"time", "measurement", "reference", "site", "station", "aero_term_mm", "air_temp_c"}, header[:7])
	assert.Equal(t, []string{"flags", "local_start"}, header[len(header)-2:], "notes come last")
	row := map[string]string{}
	for i, v := range strings.Split(lines[1], ",") {
		row[header[i]] = v
	}
	assert.Equal(t, "2023-10-02T16:00:00Z", row["time"])
	assert.Equal(t, "et_hour", row["measurement"])
	assert.Equal(t, "north-mast", row["station"])
	assert.Equal(t, "0.61", row["et_mm"], "the revision replaced the first emission")
	assert.Equal(t, "1", row["revision"])
	assert.Equal(t, "true", row["complete"])
	assert.Equal(t, "late:1", row["flags"])

	// Without a station filter the zone step is there too, and raw
	// summaries never are.
	b.Reset()
	n, err = ExportCSV(&b, o.History(), Filter{From: start, To: start.Add(24 * time.Hour)})
	require.NoError(t, err)
	assert.Equal(t, 7, n)
	assert.Contains(t, b.String(), "zone_step")
	assert.NotContains(t, b.String(), "et_raw")
}

func TestExportLineProtocolPostsBack(t *testing.T) {
	base := testenv.Influx(t)
	site := uniqueSite("kestrel-ridge")
	start := realNow.Add(-30 * time.Hour)
	o, kept := historyFixture(t, site, start)
	var b bytes.Buffer
	n, err := ExportLineProtocol(&b, o.History(), Filter{From: start, To: start.Add(24 * time.Hour)})
	require.NoError(t, err)
	require.Equal(t, len(kept), n)
	assert.NotContains(t, b.String(), "late:1", "notes stay local")

	// What a user does later: post the file to a server's write API.
	resp, err := http.Post(base+"/api/v2/write?org=lowmead&bucket=farm&precision=ns", "text/plain", &b)
	require.NoError(t, err)
	resp.Body.Close()
	require.Equal(t, http.StatusNoContent, resp.StatusCode)
	nFields := 0
	for _, p := range kept {
		nFields += len(p.Fields)
	}
	ss := waitVM(t, base, fmt.Sprintf(`{site=%q}`, site), nFields)
	assert.Equal(t, nFields, samples(ss))
	expectInVM(t, ss, kept)
}

func TestHistoryPrune(t *testing.T) {
	start := time.Date(2023, 10, 2, 15, 0, 0, 0, time.UTC)
	o, _ := historyFixture(t, "kestrel-ridge", start)
	h := o.History()
	h.retention = 90 * time.Minute
	n, err := h.Prune(start.Add(3 * time.Hour)) // keeps points at or after start+1h30
	require.NoError(t, err)
	assert.Equal(t, 5, n, "hours 0 and 1 of both stations and the zone step at hour 1")
	left, err := h.Count(Filter{})
	require.NoError(t, err)
	assert.Equal(t, 2, left)
}
