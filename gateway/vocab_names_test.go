package gateway

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"path/filepath"
	"reflect"
	"regexp"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/hourcsv"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/replay"
	"etpulse/gateway/report"
	"etpulse/gateway/state"
	"etpulse/gateway/status"
	"etpulse/gateway/store"
	"etpulse/gateway/vocab"
	"etpulse/hourly"
)

// quantityName matches a name that carries a unit suffix: a quantity.
// Every such name any writer emits must be in the vocabulary.
var quantityName = regexp.MustCompile(`_(mm|c|kpa|kpa_c|pct|mj|mj_m2|m_s|ms|rad|wm2|w_m2)$`)

// fullRecord is an hour with every optional part present (measured net
// radiation and soil heat flux, a fill), so every name of the record
// appears. The numbers are placeholders for the names, not check values.
func fullRecord() hourly.Record {
	start := time.Date(2024, 7, 3, 10, 0, 0, 0, time.UTC)
	return hourly.Record{
		Site: "s", Station: "m", Reference: hourly.Short, Start: start, End: start.Add(time.Hour),
		LocalStart: "2024-07-03T02:00", Revision: 1, Complete: true, Rain: 0.2,
		Inputs: hourly.Hour{Start: start, Length: time.Hour, AirTemp: 21.123456, Ea: 1.2345678, Wind2: 2.345678,
			Solar: 1.234567, NetRad: 0.8123456, HasNetRad: true, SoilHeat: 0.0812345, HasSoilHeat: true, SolarEstimated: true},
		Stats: map[hourly.Quantity]hourly.Stats{hourly.AirTemp: {Count: 60, Min: 20.1, Max: 22.2, Mean: 21.1, Coverage: 1}},
		Result: &hourly.Result{Reference: hourly.Short, Day: true, Pressure: 101.2345, Gamma: 0.0673456, Delta: 0.1523456,
			Es: 2.5123456, Ea: 1.2345678, VPD: 1.2777778, SunElevation: 0.912345, Ra: 3.5434567, Rso: 2.6584567, Rs: 1.234567,
			Wind2: 2.345678, RsRso: 0.4643218, Fcd: 0.3123456, FcdSource: hourly.FcdComputed, Rns: 0.95061659, Rnl: 0.1381234,
			Rn: 0.8123456, G: 0.0812345, NetRadMeasured: true, SoilHeatMeasured: true, Cn: 37, Cd: 0.24,
			RadiationTerm: 0.21539289829921476, AerodynamicTerm: 0.1234567, ET: 0.33884},
		Flags: []string{"late:1"}, Fill: "linear",
	}
}

// jsonKeys collects the object keys of a decoded JSON value, at any depth.
// The keys of the record's stats object are the sensor quantities
// (hourly.Quantity), not names of the vocabulary, so only their members
// are collected.
func jsonKeys(v any, parent string, into map[string]bool) {
	switch x := v.(type) {
	case map[string]any:
		for k, c := range x {
			if parent != "stats" {
				into[k] = true
			}
			jsonKeys(c, k, into)
		}
	case []any:
		for _, c := range x {
			jsonKeys(c, parent, into)
		}
	}
}

func keysOf(t *testing.T, b []byte) map[string]bool {
	t.Helper()
	var v any
	require.NoError(t, json.Unmarshal(b, &v), string(b))
	m := map[string]bool{}
	jsonKeys(v, "", m)
	return m
}

// typeKeys collects the json names of a struct type's fields, at any depth.
func typeKeys(t reflect.Type, into map[string]bool, seen map[reflect.Type]bool) {
	for t.Kind() == reflect.Pointer || t.Kind() == reflect.Slice || t.Kind() == reflect.Map {
		t = t.Elem()
	}
	if t.Kind() != reflect.Struct || seen[t] || t.PkgPath() == "time" {
		return
	}
	seen[t] = true
	for i := range t.NumField() {
		f := t.Field(i)
		name, _, _ := strings.Cut(f.Tag.Get("json"), ",")
		if name != "" && name != "-" && !structural(f.Type) {
			into[name] = true
		}
		typeKeys(f.Type, into, seen)
	}
}

// structural reports whether a field holds objects (a struct, or a list or
// map of them) rather than a value: its name is not a quantity's.
func structural(t reflect.Type) bool {
	for t.Kind() == reflect.Pointer || t.Kind() == reflect.Slice || t.Kind() == reflect.Map {
		t = t.Elem()
	}
	return t.Kind() == reflect.Struct && t.PkgPath() != "time"
}

// checkNames asserts that every name of an output that looks like a
// quantity is in the vocabulary and marked as appearing there, and, when
// complete is set (an output whose whole name list the test produces),
// that every name the vocabulary places there does appear.
func checkNames(t *testing.T, w vocab.Where, names map[string]bool, complete bool) {
	t.Helper()
	for k := range names {
		n, ok := vocab.Lookup(k)
		if !ok {
			assert.False(t, quantityName.MatchString(k), "%s: %q looks like a quantity but is not in the vocabulary (gateway/vocab)", w, k)
			continue
		}
		assert.NotZero(t, n.Where&w, "%s: writes %q, which the vocabulary does not place there", w, k)
	}
	if !complete {
		return
	}
	for _, n := range vocab.Names() {
		if n.Where&w != 0 {
			assert.True(t, names[n.Name], "%s: the vocabulary places %q there, but it does not appear", w, n.Name)
		}
	}
}

// TestOneVocabulary walks what every writer emits (the hourly record
// through its MQTT JSON, the retained station and zone state, a store
// point's fields and its export header, the calc, calc --daily and replay
// CSV headers, the status API and report types) and checks that every
// quantity name is the vocabulary's, in the places the vocabulary says.
func TestOneVocabulary(t *testing.T) {
	rec := fullRecord()

	b, err := pipeline.MarshalRecord(rec)
	require.NoError(t, err)
	recKeys := keysOf(t, b)
	checkNames(t, vocab.Record, recKeys, true)

	sb, err := json.Marshal(stationPayload(map[hourly.Reference]hourly.Record{rec.Reference: rec}))
	require.NoError(t, err)
	checkNames(t, vocab.StationState, keysOf(t, sb), true)
	zb, err := json.Marshal(newZoneState("s", "z"))
	require.NoError(t, err)
	checkNames(t, vocab.ZoneState, keysOf(t, zb), false)

	pts := store.HourPoints(rec)
	require.Len(t, pts, 1)
	fields := map[string]bool{}
	for k := range pts[0].Fields {
		if q, ok := strings.CutPrefix(k, vocab.CoveragePrefix); ok {
			assert.Contains(t, hourly.Quantities, hourly.Quantity(q), "coverage field %q", k)
			continue
		}
		fields[k] = true
	}
	checkNames(t, vocab.Store, fields, true)

	// etpulse export --format csv: the header of the same point from the
	// local history.
	db, err := state.Open(filepath.Join(t.TempDir(), "h.db"))
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	ob, err := store.OpenOutbox(db, store.OutboxOptions{LocalOnly: true})
	require.NoError(t, err)
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error { return ob.Enqueue(tx, pts...) }))
	h := ob.History()
	var out bytes.Buffer
	_, err = store.ExportCSV(&out, h, store.Filter{})
	require.NoError(t, err)
	header, err := csv.NewReader(&out).Read()
	require.NoError(t, err)
	exp := map[string]bool{}
	for _, k := range header {
		if !strings.HasPrefix(k, vocab.CoveragePrefix) && pts[0].Tags[k] == "" && pts[0].Notes[k] == "" && k != "time" && k != "measurement" {
			exp[k] = true
		}
	}
	checkNames(t, vocab.Store, exp, true)

	cols := func(c []string) map[string]bool {
		m := map[string]bool{}
		for _, k := range c {
			m[k] = true
		}
		return m
	}
	checkNames(t, vocab.HourCSV, cols(hourcsv.HourColumns), true)
	checkNames(t, vocab.DayCSV, cols(hourcsv.DayColumns), true)
	checkNames(t, vocab.ReplayCSV, cols(replay.Columns), true)

	st := map[string]bool{}
	for _, v := range []any{status.Overview{}, status.StationPage{}, status.ZonePage{}} {
		typeKeys(reflect.TypeOf(v), st, map[reflect.Type]bool{})
	}
	checkNames(t, vocab.Status, st, false)
	rp := map[string]bool{}
	typeKeys(reflect.TypeOf(report.Report{}), rp, map[reflect.Type]bool{})
	checkNames(t, vocab.Report, rp, false)
}

// TestRecordRounded checks that the hourly record on MQTT carries each
// number at its quantity's precision (gateway/internal/precision) and its
// format version.
func TestRecordRounded(t *testing.T) {
	b, err := pipeline.MarshalRecord(fullRecord())
	require.NoError(t, err)
	assert.NotContains(t, string(b), "0.21539289829921476")
	assert.NotRegexp(t, `\d\.\d{5,}`, string(b), "no number with more than 4 decimals")
	var m map[string]any
	require.NoError(t, json.Unmarshal(b, &m))
	assert.EqualValues(t, vocab.FormatVersion, m[vocab.FormatVersionKey])
	res := m["result"].(map[string]any)
	assert.EqualValues(t, 0.22, res[vocab.RadTermMM], "mm to 0.01")
	assert.EqualValues(t, 0.34, res[vocab.ETmm], "mm to 0.01")
	assert.EqualValues(t, 0.067, res[vocab.GammaKPaC], "kPa to 0.001")
	in := m["inputs"].(map[string]any)
	assert.EqualValues(t, 21.12, in[vocab.AirTempC], "°C to 0.01")
	assert.EqualValues(t, 2.35, in[vocab.Wind2mMS], "m/s to 0.01")

	sb, err := json.Marshal(stationPayload(map[hourly.Reference]hourly.Record{hourly.Short: fullRecord()}))
	require.NoError(t, err)
	assert.Contains(t, string(sb), `"format_version":2`)
	zb, err := json.Marshal(newZoneState("s", "z"))
	require.NoError(t, err)
	assert.Contains(t, string(zb), `"format_version":2`)
}

// TestZoneFaultsMeasurement checks that zone faults are stored in a
// measurement of their own, apart from the sensors' alerts.
func TestZoneFaultsMeasurement(t *testing.T) {
	assert.NotEqual(t, store.MeasurementAlert, store.MeasurementZoneAlert)
	assert.True(t, slices.Contains(store.Measurements(), store.MeasurementZoneAlert))
	p := store.ZoneAlertPoint("s", "pear-3", "zone-et-stale", time.Unix(0, 0), map[string]any{"active": true})
	assert.Equal(t, store.MeasurementZoneAlert, p.Measurement)
	assert.Equal(t, map[string]string{"site": "s", "zone": "pear-3", "kind": "zone-et-stale"}, p.Tags)
}
