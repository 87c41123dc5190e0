package quality

import (
	"fmt"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/alert"
	"etpulse/hourly"
)

var stepKey = alert.Key{Site: "brackenfold", Station: "orchard", Sensor: "t1", Quantity: hourly.AirTemp, Kind: alert.KindRange}

func finding(st Status, minute int, msg string) Finding {
	var v float64
	fmt.Sscan(msg, &v) // the value leads the message in these tests
	return Finding{Key: stepKey, Status: st, Severity: alert.SeverityCritical, Message: msg, Value: v, At: t0.Add(time.Duration(minute) * time.Minute), ClearAfter: 30 * time.Minute}
}

func TestStepLifecycle(t *testing.T) {
	const every = 15 * time.Minute
	var a alert.Alert
	has := false
	apply := func(f Finding) *Event {
		next, changed, ev := Step(a, has, f, every)
		if changed {
			a, has = next, true
		}
		return ev
	}

	assert.Nil(t, apply(finding(StatusGood, 0, "fine")), "nothing to clear")
	ev := apply(finding(StatusBad, 1, "61 above 55"))
	require.NotNil(t, ev)
	assert.Equal(t, EventRaised, ev.Type)
	assert.Equal(t, "61 above 55", ev.Alert.Message)

	assert.Nil(t, apply(finding(StatusBad, 2, "61 above 55")), "raised once")
	assert.Nil(t, apply(finding(StatusBad, 30, "61 above the limit 55")), "same value, reworded: no update")
	assert.Nil(t, apply(finding(StatusBad, 5, "62 above 55")), "updates are rate-limited")
	ev = apply(finding(StatusBad, 17, "63 above 55"))
	require.NotNil(t, ev)
	assert.Equal(t, EventUpdated, ev.Type)
	assert.Equal(t, t0.Add(time.Minute), ev.Alert.Since)

	// Good for 20 minutes, then bad again: the clearing clock restarts.
	assert.Nil(t, apply(finding(StatusGood, 20, "fine")))
	assert.Nil(t, apply(finding(StatusGood, 40, "fine")))
	assert.Nil(t, apply(finding(StatusBad, 41, "63 above 55")))
	assert.Nil(t, apply(finding(StatusGood, 42, "fine")))
	assert.Nil(t, apply(finding(StatusHold, 80, "")), "hold changes nothing")
	assert.Nil(t, apply(finding(StatusGood, 71, "fine")))
	ev = apply(finding(StatusGood, 72, "fine"))
	require.NotNil(t, ev)
	assert.Equal(t, EventCleared, ev.Type)
	assert.Equal(t, "cleared: fine", ev.Alert.Message)
	assert.False(t, ev.Alert.Active())

	// Raised again later as a new alert.
	ev = apply(finding(StatusBad, 90, "70 above 55"))
	require.NotNil(t, ev)
	assert.Equal(t, EventRaised, ev.Type)
	assert.Equal(t, t0.Add(90*time.Minute), ev.Alert.Since)
}

func TestStepSeverityChangePublishesAtOnce(t *testing.T) {
	a, _, _ := Step(alert.Alert{}, false, finding(StatusBad, 0, "x"), time.Hour)
	f := finding(StatusBad, 1, "y")
	f.Severity = alert.SeverityWarning
	_, changed, ev := Step(a, true, f, time.Hour)
	assert.True(t, changed)
	require.NotNil(t, ev)
	assert.Equal(t, alert.SeverityWarning, ev.Alert.Severity)
}

func TestKeyValidate(t *testing.T) {
	require.NoError(t, stepKey.Validate())
	k := stepKey
	k.Sensor = "a/b"
	assert.EqualError(t, k.Validate(), `alert key: sensor must be a non-empty topic level without '/', '+' or '#', got "a/b"`)
	k = stepKey
	k.Kind = ""
	assert.Error(t, k.Validate())
}

func TestNum(t *testing.T) {
	for v, want := range map[float64]string{10: "10", 0.735: "0.735", 21.3: "21.3", 104.2: "104.2", 1367.4: "1367", -0.0001: "0", 2.2: "2.2", 1.105: "1.1"} {
		assert.Equal(t, want, num(v), "%v", v)
	}
}
