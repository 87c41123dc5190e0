package status

import (
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/state"
	"etpulse/gateway/store"
)

// TestHourViewMigratedHistory: the status pages read only the vocabulary
// names, since opening a file of schema version 2 renames its stored hours
// (gateway/state migrate2to3): the hours of the committed version-2 file
// (testdata/state/v2-names.db, stored as t_air_c and rs_mj_m2 for the
// measured solar) show their temperature and measured solar once the file
// is opened. A point with the old names, which no migrated file holds,
// shows neither. The numbers are the generator's placeholders
// (testdata/state/gen/names.go.txt).
func TestHourViewMigratedHistory(t *testing.T) {
	raw, err := os.ReadFile("../../testdata/state/v2-names.db")
	require.NoError(t, err)
	path := filepath.Join(t.TempDir(), "etpulse.db")
	require.NoError(t, os.WriteFile(path, raw, 0o600))
	db, err := state.Open(path)
	require.NoError(t, err)
	defer db.Close()
	h, err := store.OpenHistory(db)
	require.NoError(t, err)
	t0 := time.Date(2026, 2, 3, 0, 0, 0, 0, time.UTC)
	views := map[time.Time]HourView{}
	require.NoError(t, h.Range(store.Filter{Measurements: []string{store.MeasurementHour}}, func(p store.Point) error {
		views[p.Time] = hourView(p)
		return nil
	}))
	for at, solar := range map[time.Time]float64{t0: 1.875, t0.Add(time.Hour): 3.125} {
		v := views[at]
		if assert.NotNil(t, v.AirTemp, at) && assert.NotNil(t, v.Rs, at) {
			assert.Equal(t, 22.625, *v.AirTemp, at)
			assert.Equal(t, solar, *v.Rs, at, "the measured solar")
		}
	}

	old := hourView(store.Point{Measurement: store.MeasurementHour, Time: t0,
		Fields: map[string]any{"t_air_c": 24.5, "rs_mj_m2": 2.1, "et_mm": 0.5}})
	assert.Nil(t, old.AirTemp, "old names are not read")
	assert.Nil(t, old.Rs, "old names are not read")
}
