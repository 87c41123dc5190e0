package hourly

import (
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// A prepared station computes exactly what the bare one does: Prepared only
// hoists FAO-56 eq. 7 out of the per-hour path.
func TestPreparedStationSameResult(t *testing.T) {
	st := ex19
	bare, _, err := Compute(st, FAO56, ex19Day(), Carry{})
	require.NoError(t, err)
	prepared, _, err := Compute(st.Prepared(), FAO56, ex19Day(), Carry{})
	require.NoError(t, err)
	assert.Equal(t, bare, prepared)
	assert.InDelta(t, 101.2, st.Prepared().Pressure, 0.05, "FAO-56 Example 19, P at 8 m (from memory)")
}

// A measured station pressure replaces eq. 7 and flows into γ (FAO-56 eq. 8).
func TestGivenStationPressure(t *testing.T) {
	st := ex19
	st.Pressure = 90
	r, _, err := Compute(st, Short, ex19Day(), Carry{})
	require.NoError(t, err)
	assert.Equal(t, 90.0, r.Pressure)
	assert.InDelta(t, 0.665e-3*90, r.Gamma, 1e-12)

	st.Pressure = 12
	_, _, err = Compute(st, Short, ex19Day(), Carry{})
	require.ErrorIs(t, err, ErrConfig)
	assert.Contains(t, err.Error(), "station pressure: 12 kPa outside 30..110")
}
