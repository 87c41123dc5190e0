package quality

import (
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/alert"
	"etpulse/gateway/config"
	"etpulse/hourly"
)

// misplaced returns the hours of w as a gateway configured with st would
// keep them: the readings of the real station, the sun of st.
func misplaced(w []HourObs, st hourly.Station) []HourObs {
	out := make([]HourObs, len(w))
	for i, o := range w {
		sp := hourly.SunForPeriod(st, o.Start, 3600e9)
		o.SunElevation, o.Ra, o.Rso = sp.Elevation, sp.Ra, hourly.RsoSimple(sp.Ra, st.Elevation)
		out[i] = o
	}
	return out
}

// TestShiftedSunNamesPlace: a station configured with its longitude's sign
// flipped (120.4 instead of -120.4, UTC-8) sees its real sun about 16 h
// (-8 h) off: radiation in the computed dark hours, none in the computed
// day. The solar alerts that fire name the station longitude or UTC offset
// as the likely cause rather than the sensor alone.
func TestShiftedSunNamesPlace(t *testing.T) {
	cfg := testAlerts()
	flipped := brackenfold
	flipped.Longitude = -brackenfold.Longitude
	w := misplaced(weather{}.hours(3*24), flipped)

	// From the second day on (the same hours seen twice) every solar alert
	// names the place and time; before that the evidence is one day short.
	named := 0
	for i := 1; i <= len(w); i++ {
		for _, f := range HourChecks("brackenfold", "orchard", cfg, config.StationAlerts{}, w[:i]) {
			if f.Quantity != hourly.Solar || f.Status != StatusBad {
				continue
			}
			if i >= shiftMinHours {
				named++
				assert.Contains(t, f.Message, "station longitude or UTC offset", "hour %d %s: %s", i, f.Kind, f.Message)
			}
		}
	}
	require.Positive(t, named, "the flipped station raises solar alerts")
	fs := HourChecks("brackenfold", "orchard", cfg, config.StationAlerts{}, w)
	f, ok := find(fs, alert.KindNightSolar, hourly.Solar)
	if !ok || f.Status != StatusBad {
		f, ok = find(fs, alert.KindStuck, hourly.Solar)
	}
	require.True(t, ok)
	assert.Contains(t, f.Message, "measured radiation follows the computed sun 8 h earlier", f.Message)

	// The same readings with the right place: no such cause anywhere.
	for _, k := range []alert.Kind{alert.KindNightSolar, alert.KindStuck} {
		for _, f := range runWindow(cfg, config.StationAlerts{}, weather{nightSolar: 35}.hours(3*24), k, hourly.Solar) {
			assert.NotContains(t, f.Message, "longitude", "%s", k)
		}
	}
}
