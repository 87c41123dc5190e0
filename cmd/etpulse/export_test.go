package main

import (
	"bytes"
	"context"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

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
		{[]string{"--state", path, "--to", "2024-06-12"}, "--from and --to are required"},
		{[]string{"--state", path, "--from", "yesterday", "--to", "2024-06-12"}, `--from: parse time "yesterday"`},
		{[]string{"--state", path, "--from", "2024-06-12", "--to", "2024-06-11"}, "--to 2024-06-11T00:00:00Z must be after --from 2024-06-12T00:00:00Z"},
		{[]string{"--state", path, "--from", "2024-06-11", "--to", "2024-06-12", "--format", "json"}, `--format must be csv or lp, got "json"`},
		{[]string{"--state", path, "--from", "2024-06-11", "--to", "2024-06-12", "--measurement", "et_day"}, `unknown measurement "et_day"`},
		{[]string{"--from", "2024-06-11", "--to", "2024-06-12"}, "--state FILE or --config FILE is required"},
	} {
		code, _, errs := export(t, c.args...)
		assert.Equal(t, exitUsage, code, c.args)
		assert.Contains(t, errs, c.want)
	}
	code, _, errs := export(t, "--state", filepath.Join(t.TempDir(), "missing.db"), "--from", "2024-06-11", "--to", "2024-06-12")
	assert.Equal(t, exitError, code)
	assert.Contains(t, errs, "open state")
}
