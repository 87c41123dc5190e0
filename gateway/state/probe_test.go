package state

import (
	"encoding/json"
	"reflect"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"etpulse/controllers"
	"etpulse/hourly"
)

// TestZoneProbeRoundTrip: every field of controllers.ProbeState survives the
// state file's persistence form. The domain value is filled field by field
// through reflection, so a field added to the domain type and not to
// ZoneProbe fails here (and is a schema change: see DEVELOPERS.md).
func TestZoneProbeRoundTrip(t *testing.T) {
	at := time.Date(2026, 7, 14, 5, 0, 0, 0, time.UTC)
	var p controllers.ProbeState
	v := reflect.ValueOf(&p).Elem()
	for i := range v.NumField() {
		f := v.Field(i)
		switch f.Kind() {
		case reflect.Float64:
			f.SetFloat(float64(i) + 0.5)
		case reflect.Int:
			f.SetInt(int64(i) + 1)
		case reflect.Struct:
			require.Equal(t, reflect.TypeOf(time.Time{}), f.Type(), "field %s", v.Type().Field(i).Name)
			f.Set(reflect.ValueOf(at.Add(time.Duration(i) * time.Hour)))
		case reflect.Map:
			switch f.Type() {
			case reflect.TypeOf(map[string]bool{}):
				f.Set(reflect.ValueOf(map[string]bool{"probe-stuck": true}))
			case reflect.TypeOf(map[string]controllers.ProbeMark{}):
				f.Set(reflect.ValueOf(map[string]controllers.ProbeMark{"p30": {Value: 31.5, Quantity: hourly.Quantity("soil_water"),
					Time: at, ChangedAt: at.Add(-time.Hour), ETcSince: 0.42}}))
			default:
				t.Fatalf("field %s: type %s not covered by the persistence form", v.Type().Field(i).Name, f.Type())
			}
		default:
			t.Fatalf("field %s: kind %s not covered by the persistence form", v.Type().Field(i).Name, f.Kind())
		}
	}
	b := ZoneBalanceOf(controllers.State{Depletion: 12, Probe: &p}, false, "")
	raw, err := json.Marshal(b)
	require.NoError(t, err)
	var back ZoneBalance
	require.NoError(t, json.Unmarshal(raw, &back))
	require.Equal(t, &p, back.State().Probe)

	require.Nil(t, ZoneBalanceOf(controllers.State{Depletion: 12}, false, "").State().Probe, "a zone without probes stores none")
}
