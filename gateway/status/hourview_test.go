package status

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/store"
)

// TestHourViewNamesOldAndNew: an hour the history stored in format
// version 2 (air_temp_c, solar_mj_m2) and one stored before it (t_air_c,
// rs_mj_m2 for the measured solar) both show their temperature and solar
// radiation on the status pages. The numbers are placeholders.
func TestHourViewNamesOldAndNew(t *testing.T) {
	at := time.Date(2026, 7, 14, 10, 0, 0, 0, time.UTC)
	for name, fields := range map[string]map[string]any{
		"v2": {"air_temp_c": 24.5, "solar_mj_m2": 2.1, "rs_mj_m2": 2.0, "et_mm": 0.5},
		"v1": {"t_air_c": 24.5, "rs_mj_m2": 2.1, "et_mm": 0.5},
	} {
		h := hourView(store.Point{Measurement: store.MeasurementHour, Time: at, Fields: fields})
		require.NotNil(t, h.AirTemp, name)
		require.NotNil(t, h.Rs, name)
		assert.Equal(t, 24.5, *h.AirTemp, name)
		assert.Equal(t, 2.1, *h.Rs, name, "the measured solar")
	}
}
