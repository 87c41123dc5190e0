package quality

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/alert"
	"etpulse/hourly"
)

var t0 = time.Date(2026, 6, 3, 18, 0, 0, 0, time.UTC)

func sample(sensor string, q hourly.Quantity, minute int, v float64) hourly.Sample {
	return hourly.Sample{Sensor: sensor, Quantity: q, Time: t0.Add(time.Duration(minute) * time.Minute), Value: v}
}

// observe feeds samples (arriving at their own time) and returns every
// finding of kind k.
func observe(c *ReadingChecks, k alert.Kind, ss ...hourly.Sample) []Finding {
	var out []Finding
	for _, s := range ss {
		for _, f := range c.Observe(s, s.Time) {
			if f.Kind == k {
				out = append(out, f)
			}
		}
	}
	return out
}

func TestRangeCheck(t *testing.T) {
	c := NewReadingChecks("brackenfold", "orchard", testAlerts())
	fs := observe(c, alert.KindRange, sample("t1", hourly.AirTemp, 0, 21.4), sample("t1", hourly.AirTemp, 1, 61.0), sample("t1", hourly.AirTemp, 2, -45))
	require.Len(t, fs, 3)
	assert.Equal(t, StatusGood, fs[0].Status)
	assert.Equal(t, StatusBad, fs[1].Status)
	assert.Equal(t, "air_temp reading 61 above the plausible maximum 55", fs[1].Message)
	assert.Equal(t, StatusBad, fs[2].Status)
	assert.Equal(t, "air_temp reading -45 below the plausible minimum -40", fs[2].Message)
}

func TestSpikeCheck(t *testing.T) {
	c := NewReadingChecks("brackenfold", "orchard", testAlerts())
	// Normal minute-by-minute warming, then a 9 °C jump in one minute.
	fs := observe(c, alert.KindSpike,
		sample("t1", hourly.AirTemp, 0, 20.0), sample("t1", hourly.AirTemp, 1, 20.2),
		sample("t1", hourly.AirTemp, 2, 20.3), sample("t1", hourly.AirTemp, 3, 29.3))
	require.Len(t, fs, 3)
	assert.Equal(t, StatusGood, fs[0].Status)
	assert.Equal(t, StatusGood, fs[1].Status)
	assert.Equal(t, StatusBad, fs[2].Status)
	assert.Equal(t, 9.0, fs[2].Value)
	assert.Contains(t, fs[2].Message, "limit 3 per minute")

	// Fast sampling: 0.4 °C in 10 s is compared as per minute, not x6.
	c = NewReadingChecks("brackenfold", "orchard", testAlerts())
	s1 := sample("t1", hourly.AirTemp, 0, 20.0)
	s2 := s1
	s2.Time, s2.Value = s1.Time.Add(10*time.Second), 20.4
	fs = observe(c, alert.KindSpike, s1, s2)
	require.Len(t, fs, 1)
	assert.Equal(t, StatusGood, fs[0].Status)

	// A gap is not a jump.
	c = NewReadingChecks("brackenfold", "orchard", testAlerts())
	fs = observe(c, alert.KindSpike, sample("t1", hourly.AirTemp, 0, 12), sample("t1", hourly.AirTemp, 45, 25))
	assert.Empty(t, fs)

	// Solar has no spike limit by default: clouds.
	c = NewReadingChecks("brackenfold", "orchard", testAlerts())
	fs = observe(c, alert.KindSpike, sample("p1", hourly.Solar, 0, 900), sample("p1", hourly.Solar, 1, 150))
	assert.Empty(t, fs)
}

func TestRHAboveSaturation(t *testing.T) {
	c := NewReadingChecks("brackenfold", "orchard", testAlerts())
	fs := observe(c, alert.KindRHHigh, sample("h1", hourly.RelHumidity, 0, 101.5), sample("h1", hourly.RelHumidity, 1, 102.6))
	require.Len(t, fs, 2)
	assert.Equal(t, StatusGood, fs[0].Status, "within the 2 % tolerance")
	assert.Equal(t, StatusBad, fs[1].Status)
	assert.Equal(t, "relative humidity 102.6 %, more than 2 % above saturation", fs[1].Message)
}

func TestDewPointAboveAir(t *testing.T) {
	c := NewReadingChecks("brackenfold", "orchard", testAlerts())
	fs := observe(c, alert.KindDewAboveAir,
		sample("t1", hourly.AirTemp, 0, 14.0),
		sample("d1", hourly.DewPoint, 1, 13.6), // normal near-saturated night
		sample("d1", hourly.DewPoint, 2, 16.2), // 2.2 °C above the air
		sample("t1", hourly.AirTemp, 3, 14.1),  // re-checked against the new air reading
		sample("d1", hourly.DewPoint, 30, 9.0), // too far from the last air reading: no pair
	)
	require.Len(t, fs, 3)
	assert.Equal(t, StatusGood, fs[0].Status)
	assert.Equal(t, StatusBad, fs[1].Status)
	assert.Contains(t, fs[1].Message, "dew point 16.2 °C above air temperature 14 °C by 2.2 °C")
	assert.Equal(t, "d1", fs[2].Sensor)
	assert.Equal(t, StatusBad, fs[2].Status)
}

func TestSilence(t *testing.T) {
	c := NewReadingChecks("brackenfold", "orchard", testAlerts())
	c.Expect("t1", hourly.AirTemp, t0)
	c.Expect("r1", hourly.Rain, t0) // rain gauges report only while it rains
	assert.Equal(t, t0.Add(15*time.Minute), c.NextSilence())

	fs := c.Silence(t0.Add(10 * time.Minute))
	require.Len(t, fs, 1)
	assert.Equal(t, StatusGood, fs[0].Status)

	fs = c.Silence(t0.Add(20 * time.Minute))
	require.Len(t, fs, 1)
	assert.Equal(t, StatusBad, fs[0].Status)
	assert.Equal(t, "no air_temp reading since 2026-06-03T18:00:00Z, limit 15m0s", fs[0].Message)

	// A reading arrives: the silence verdict is good at once.
	got := observe(c, alert.KindSilence, sample("t1", hourly.AirTemp, 21, 18.5))
	require.Len(t, got, 1)
	assert.Equal(t, StatusGood, got[0].Status)
	assert.Equal(t, t0.Add(36*time.Minute), c.NextSilence())
}

// TestSpikeMessageAndPayloadRounded: the time between the readings is a
// short duration in the message (not 7.903066ms), and the retained alert
// payload carries value and limit rounded as the message shows them.
func TestSpikeMessageAndPayloadRounded(t *testing.T) {
	c := NewReadingChecks("brackenfold", "orchard", testAlerts())
	s1 := sample("t1", hourly.AirTemp, 0, 20.0)
	s2 := s1
	s2.Time, s2.Value = s1.Time.Add(7903066*time.Nanosecond+40*time.Second), 23.123456789
	fs := observe(c, alert.KindSpike, s1, s2)
	require.Len(t, fs, 1)
	require.Equal(t, StatusBad, fs[0].Status)
	assert.Equal(t, "air_temp changed 20 -> 23.1 in 40s (3.12 per minute), limit 3 per minute", fs[0].Message)

	a := alert.Alert{Key: fs[0].Key, Severity: fs[0].Severity, Message: fs[0].Message, Value: fs[0].Value, Limit: fs[0].Limit,
		Since: s2.Time, Updated: s2.Time}
	b, err := MarshalAlert(a)
	require.NoError(t, err)
	assert.Contains(t, string(b), `"value":3.12,`)
	assert.Contains(t, string(b), `"limit":3,`)
}

// TestSpikeAcrossRestart: after a restart the checks resume from the last
// reading the state file kept, so the first reading after it is compared
// with that one (without it a jump across the restart went unseen); a
// reading observed since is not overwritten.
func TestSpikeAcrossRestart(t *testing.T) {
	c := NewReadingChecks("brackenfold", "orchard", testAlerts())
	c.Resume("t1", hourly.AirTemp, t0, 20.0)
	fs := observe(c, alert.KindSpike, sample("t1", hourly.AirTemp, 1, 29.0))
	require.Len(t, fs, 1)
	assert.Equal(t, StatusBad, fs[0].Status)

	c = NewReadingChecks("brackenfold", "orchard", testAlerts())
	observe(c, alert.KindSpike, sample("t1", hourly.AirTemp, 0, 28.5))
	c.Resume("t1", hourly.AirTemp, t0, 20.0)
	fs = observe(c, alert.KindSpike, sample("t1", hourly.AirTemp, 1, 29.0))
	require.Len(t, fs, 1)
	assert.Equal(t, StatusGood, fs[0].Status, "the reading observed since the restart is the previous one")
}
