package main

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/alert"
	"etpulse/gateway/quality"
	"etpulse/gateway/state"
	"etpulse/gateway/store"
)

// demoState runs `etpulse demo --days 1 --seed 3 --state FILE` and returns
// the kept state file: an invented farm (consistency checks only, never
// check values).
func demoState(t *testing.T) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "demo.db")
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"demo", "--days", "1", "--seed", "3", "--state", path}, nil, &out, &errOut)
	require.Equal(t, exitOK, code, "stderr: %s", errOut.String())
	return path
}

// storeSchema returns, per measurement, the fields the gateway's code wrote
// to the local history of a demo run: the schema as the code builds it
// (store.HourPoints, the zone and valve points, quality.AlertPoint), not a
// copy kept in a test.
func storeSchema(t *testing.T, path string) map[string]map[string]bool {
	t.Helper()
	db, err := state.OpenReadOnly(path)
	require.NoError(t, err)
	defer db.Close()
	h, err := store.OpenHistory(db)
	require.NoError(t, err)
	schema := map[string]map[string]bool{}
	require.NoError(t, h.Range(store.Filter{}, func(p store.Point) error {
		if schema[p.Measurement] == nil {
			schema[p.Measurement] = map[string]bool{}
		}
		for f := range p.Fields {
			schema[p.Measurement][f] = true
		}
		return nil
	}))
	return schema
}

// TestGrafanaDashboardMatchesSchema parses deploy/grafana-etpulse.json and
// checks that every panel queries the data-source variable and that every
// Flux query names only measurements the store declares
// (store.Measurements) and fields the gateway writes to them.
func TestGrafanaDashboardMatchesSchema(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("..", "..", "deploy", "grafana-etpulse.json"))
	require.NoError(t, err)
	var dash struct {
		Inputs []struct {
			Name, Type, PluginID string
		} `json:"__inputs"`
		Templating struct {
			List []struct {
				Name, Type string
				Query      any
			}
		}
		Panels []struct {
			Type, Title string
			Datasource  struct{ Type, UID string }
			Targets     []struct {
				Datasource struct{ UID string }
				Query      string
			}
		}
	}
	require.NoError(t, json.Unmarshal(raw, &dash))
	require.Len(t, dash.Inputs, 1)
	assert.Equal(t, "datasource", dash.Inputs[0].Type)
	vars := map[string]string{}
	for _, v := range dash.Templating.List {
		vars[v.Name] = v.Type
	}
	assert.Equal(t, "datasource", vars["DS"], "a data-source variable")
	for _, name := range []string{"site", "station", "zone"} {
		assert.Equal(t, "query", vars[name], "variable %s", name)
	}

	schema := storeSchema(t, demoState(t))
	// The demo day raises no zone fault; the fields of one come from the
	// code that writes them.
	zp := quality.AlertPoint(quality.Event{Alert: alert.Alert{Key: alert.ZoneKey("s", "z", alert.KindZoneETStale)}})
	require.Equal(t, store.MeasurementZoneAlert, zp.Measurement)
	schema[zp.Measurement] = map[string]bool{}
	for f := range zp.Fields {
		schema[zp.Measurement][f] = true
	}
	declared := store.Measurements()
	for m := range schema {
		require.Contains(t, declared, m, "the history holds a measurement store.Measurements does not declare")
	}
	measRe := regexp.MustCompile(`_measurement\s*==\s*"([^"]*)"`)
	fieldRe := regexp.MustCompile(`_field\s*==\s*"([^"]*)"`)
	queried := map[string]bool{}
	panels := 0
	for _, p := range dash.Panels {
		if p.Type == "row" {
			continue
		}
		panels++
		assert.Equal(t, "${DS}", p.Datasource.UID, "panel %q", p.Title)
		require.NotEmpty(t, p.Targets, "panel %q", p.Title)
		for _, tg := range p.Targets {
			assert.Equal(t, "${DS}", tg.Datasource.UID, "panel %q", p.Title)
			ms := measRe.FindAllStringSubmatch(tg.Query, -1)
			require.Len(t, ms, 1, "panel %q: one measurement per query:\n%s", p.Title, tg.Query)
			m := ms[0][1]
			assert.True(t, slices.Contains(declared, m), "panel %q: measurement %q not in the store schema %v", p.Title, m, declared)
			queried[m] = true
			fs := fieldRe.FindAllStringSubmatch(tg.Query, -1)
			assert.NotEmpty(t, fs, "panel %q: the query names its fields", p.Title)
			for _, f := range fs {
				assert.True(t, schema[m][f[1]], "panel %q: %s has no field %q (fields written: %v)", p.Title, m, f[1], keys(schema[m]))
			}
		}
	}
	assert.GreaterOrEqual(t, panels, 8)
	for _, m := range []string{store.MeasurementHour, store.MeasurementZone, store.MeasurementCommand, store.MeasurementReport, store.MeasurementAlert, store.MeasurementZoneAlert, store.MeasurementFlow} {
		assert.True(t, queried[m], "a panel shows %s", m)
	}
}

func keys(m map[string]bool) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}
