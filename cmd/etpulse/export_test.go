package main

import (
	"bytes"
	"context"
	"encoding/csv"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/demo"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
)

// exportFixture writes a state file with a local history of the invented
// "Lowmead" fields: two stations' hours and a zone step.
func exportFixture(t *testing.T) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "state.db")
	db, err := state.Open(path)
	require.NoError(t, err)
	o, err := store.OpenOutbox(db, store.OutboxOptions{LocalOnly: true})
	require.NoError(t, err)
	at := time.Date(2024, 6, 11, 9, 0, 0, 0, time.UTC)
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
		return o.Enqueue(tx,
			store.Point{Class: store.ClassHour, Measurement: store.MeasurementHour,
				Tags:   map[string]string{"site": "lowmead", "station": "east-mast", "reference": "short"},
				Fields: map[string]any{"et_mm": 0.42, "revision": 0, "complete": true}, Time: at},
			store.Point{Class: store.ClassHour, Measurement: store.MeasurementHour,
				Tags:   map[string]string{"site": "lowmead", "station": "west-mast", "reference": "short"},
				Fields: map[string]any{"et_mm": 0.39, "revision": 0, "complete": true}, Time: at},
			store.ZonePoint("lowmead", "field-7", at.Add(time.Hour), map[string]any{"depletion_mm": 14.2}),
		)
	}))
	require.NoError(t, db.Close())
	return path
}

func export(t *testing.T, args ...string) (int, string, string) {
	var out, errb bytes.Buffer
	code := run(context.Background(), append([]string{"export"}, args...), strings.NewReader(""), &out, &errb)
	return code, out.String(), errb.String()
}

func TestExportCommand(t *testing.T) {
	path := exportFixture(t)
	code, out, errs := export(t, "--state", path, "--from", "2024-06-11", "--to", "2024-06-12", "--format", "lp", "--station", "east-mast")
	require.Equal(t, exitOK, code, errs)
	assert.Equal(t, "et_hour,reference=short,site=lowmead,station=east-mast complete=true,et_mm=0.42,revision=0i 1718096400000000000\n", out)
	assert.Contains(t, errs, "etpulse export: 1 point\n")

	code, out, errs = export(t, "--state", path, "--from", "2024-06-11T10:00", "--to", "2024-06-11T11:00:00Z")
	require.Equal(t, exitOK, code, errs)
	assert.Equal(t, "time,measurement,site,zone,depletion_mm\n2024-06-11T10:00:00Z,zone_step,lowmead,field-7,14.2\n", out)
}

func TestExportUsageErrors(t *testing.T) {
	path := exportFixture(t)
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--state", path, "--to", "2024-06-12"}, "--from: required: give a time such as 2024-07-03 (UTC)"},
		{[]string{"--state", path, "--from", "yesterday", "--to", "2024-06-12"}, `--from: parse time "yesterday"`},
		{[]string{"--state", path, "--from", "2024-06-12", "--to", "2024-06-11"}, "--to: 2024-06-11T00:00:00Z is not after the start 2024-06-12T00:00:00Z"},
		{[]string{"--state", path, "--from", "2024-06-11", "--to", "2024-06-12", "--format", "json"}, `--format: must be csv or lp, got "json"`},
		{[]string{"--state", path, "--from", "2024-06-11", "--to", "2024-06-12", "--measurement", "et_day"}, `unknown measurement "et_day"`},
		{[]string{"--from", "2024-06-11", "--to", "2024-06-12"}, "give --state FILE, or the configuration as the first argument, --config FILE or ETPULSE_CONFIG"},
	} {
		code, _, errs := export(t, c.args...)
		assert.Equal(t, exitUsage, code, c.args)
		assert.Contains(t, errs, c.want)
	}
	code, _, errs := export(t, "--state", filepath.Join(t.TempDir(), "missing.db"), "--from", "2024-06-11", "--to", "2024-06-12")
	assert.Equal(t, exitError, code)
	assert.Contains(t, errs, "open state")
}

// hourExport is the et_hour rows of an export's CSV by
// station/reference/time, each as column -> cell (empty cells left out),
// and the columns of its header.
type hourExport struct {
	rows    map[string]map[string]string
	columns map[string]bool
}

func hourRows(t *testing.T, out string) hourExport {
	t.Helper()
	recs, err := csv.NewReader(strings.NewReader(out)).ReadAll()
	require.NoError(t, err, out)
	require.NotEmpty(t, recs, "header row")
	e := hourExport{rows: map[string]map[string]string{}, columns: map[string]bool{}}
	for _, c := range recs[0] {
		e.columns[c] = true
	}
	for _, r := range recs[1:] {
		row := map[string]string{}
		for i, c := range r {
			if c != "" {
				row[recs[0][i]] = c
			}
		}
		if row["measurement"] == store.MeasurementHour {
			e.rows[row["station"]+"/"+row["reference"]+"/"+row["time"]] = row
		}
	}
	return e
}

// TestExportWhileGatewayRuns runs `etpulse run` on the real broker and
// feeds it six hours of the demo farm's readings an hour at a time while
// `etpulse export --config` reads the history through the gateway's HTTP
// listener, over and over until each hour has closed; then it stops the gateway and exports from the file. Every
// hourly record exported while the gateway was writing is in the final
// export, at the same or an earlier revision, and identical when the
// revision is the same.
func TestExportWhileGatewayRuns(t *testing.T) {
	url := testBroker(t)
	dir := t.TempDir()
	start := time.Now().UTC().Truncate(time.Hour).Add(-8 * time.Hour) // the daemon runs on the wall clock
	root := fmt.Sprintf("exrun%d", time.Now().UnixNano()%1e9)
	sim := demo.New(demo.Options{Seed: 7, Start: start, TopicRoot: root, Stations: []string{demo.Paddock, demo.Glasshouse}})
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	addr := ln.Addr().String()
	require.NoError(t, ln.Close())
	doc := sim.ConfigYAML(demo.ConfigOptions{BrokerURL: url, ClientID: root + "-gw", StatePath: filepath.Join(dir, "state.db"),
		LateWindow: 12 * time.Hour, SilenceClose: 24 * time.Hour})
	const anyPort = `listen: "127.0.0.1:0"`
	require.Contains(t, doc, anyPort)
	cfgPath := filepath.Join(dir, "farm.yaml")
	require.NoError(t, os.WriteFile(cfgPath, []byte(strings.Replace(doc, anyPort, `listen: "`+addr+`"`, 1)), 0o600))

	ctx, cancel := context.WithCancel(context.Background())
	logFile, err := os.Create(filepath.Join(dir, "gateway.log")) // an *os.File takes the daemon's concurrent writes
	require.NoError(t, err)
	defer logFile.Close()
	dlog := func() string { b, _ := os.ReadFile(logFile.Name()); return string(b) }
	done := make(chan int, 1)
	go func() {
		done <- run(ctx, []string{"run", "--config", cfgPath}, strings.NewReader(""), io.Discard, logFile)
	}()
	stopped := false
	stop := func() int {
		if stopped {
			return exitOK
		}
		stopped = true
		cancel()
		return <-done
	}
	t.Cleanup(func() { stop() })
	require.Eventually(t, func() bool {
		resp, err := http.Get("http://" + addr + "/readyz")
		if err != nil {
			return false
		}
		resp.Body.Close()
		return resp.StatusCode == http.StatusOK
	}, 20*time.Second, 50*time.Millisecond, "gateway ready: %s", dlog())

	dctx, dcancel := context.WithTimeout(context.Background(), 10*time.Second)
	pub, err := mqtt.Dial(dctx, mqtt.Options{URL: url, ClientID: root + "-pub"})
	dcancel()
	require.NoError(t, err)
	defer pub.Close(time.Second)

	args := []string{"export", "--config", cfgPath, "--from", start.Format(time.RFC3339), "--to", start.Add(8 * time.Hour).Format(time.RFC3339)}
	var running []hourExport
	exportNow := func() {
		code, out, errs := export(t, args[1:]...)
		require.Equal(t, exitOK, code, errs)
		require.Contains(t, errs, "read through the running gateway at http://"+addr)
		running = append(running, hourRows(t, out))
	}
	msgs := sim.Generate(start, start.Add(6*time.Hour+10*time.Minute))
	for h := 0; h < 7; h++ {
		end := start.Add(time.Duration(h+1) * time.Hour)
		var chunk []demo.Message
		for len(msgs) > 0 && msgs[0].At.Before(end) {
			chunk, msgs = append(chunk, msgs[0]), msgs[1:]
		}
		// Publish the hour while exporting: the gateway writes as it is read.
		pubDone := make(chan error, 1)
		go func() {
			for _, m := range chunk {
				if err := pub.Publish(context.Background(), m.Topic, 1, false, m.Payload); err != nil {
					pubDone <- err
					return
				}
			}
			pubDone <- nil
		}()
		// Export over and over until the hour before this one has closed
		// (two stations): the gateway is writing during these reads.
		deadline := time.Now().Add(30 * time.Second)
		for len(running) == 0 || len(running[len(running)-1].rows) < 2*h {
			require.True(t, time.Now().Before(deadline), "hour %d not closed: %s", h, dlog())
			exportNow()
		}
		require.NoError(t, <-pubDone)
	}
	require.Equal(t, exitOK, stop(), dlog())

	code, out, errs := export(t, args[1:]...)
	require.Equal(t, exitOK, code, errs)
	assert.Contains(t, errs, "no gateway answers at http://"+addr)
	assert.Contains(t, errs, "reading the state file "+filepath.Join(dir, "state.db"))
	final := hourRows(t, out)
	require.GreaterOrEqual(t, len(final.rows), 10, "two stations, at least five closed hours each")

	grew := 0
	counts := make([]int, len(running))
	for i, exp := range running {
		counts[i] = len(exp.rows)
		if i > 0 && len(exp.rows) > len(running[i-1].rows) {
			grew++
		}
		for k, row := range exp.rows {
			f, ok := final.rows[k]
			if !assert.True(t, ok, "export %d: hour %s missing after the stop", i, k) {
				continue
			}
			rr, _ := strconv.Atoi(row["revision"])
			fr, _ := strconv.Atoi(f["revision"])
			assert.LessOrEqual(t, rr, fr, "export %d: hour %s has a later revision than after the stop", i, k)
			if rr != fr {
				continue
			}
			// Same revision: the same cells (header and rows of one export
			// come from one read transaction, so no column is missing).
			for c := range final.columns {
				assert.Equal(t, f[c], row[c], "export %d: hour %s at revision %d, column %s", i, k, rr, c)
			}
		}
	}
	t.Logf("hours in the %d exports while running: %v; after the stop: %d", len(running), counts, len(final.rows))
	assert.GreaterOrEqual(t, grew, 3, "the history grew between exports while the gateway ran")
	assert.NotEmpty(t, running[len(running)-1].rows, "hours exported while running")
}
