package controllers

import (
	"errors"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// A finished report before the command's start cannot be true (a controller
// runs a command from its start): it is refused with a reason naming the
// start, and it does not consume the command, so the real controller's
// report later is credited.
func TestReportBeforeStartRefusedAndNotConsumed(t *testing.T) {
	p := DefaultPolicy
	c := testCommand() // 60 min from 05:01 UTC
	c.MarkSent(c.Start.Add(-time.Minute))

	forged := Report{ID: c.ID, State: ReportFinished, VolumeL: 1e15, HasVolume: true}
	_, err := c.Apply(forged, c.Start.Add(-55*time.Second), p)
	require.Error(t, err)
	assert.True(t, errors.Is(err, ErrInput))
	assert.Contains(t, err.Error(), "before the command's start")
	assert.Equal(t, Sent, c.State, "a refused report does not answer the command")
	assert.False(t, c.Credited)

	// A started report before the start is refused the same way.
	_, err = c.Apply(Report{ID: c.ID, State: ReportStarted}, c.Start.Add(-10*time.Minute), p)
	require.Error(t, err)
	assert.Equal(t, Sent, c.State)

	// The real report, after the run: credited in full.
	o, err := c.Apply(Report{ID: c.ID, State: ReportFinished, MinutesRun: 60, HasMinutes: true}, c.Start.Add(61*time.Minute), p)
	require.NoError(t, err)
	assert.True(t, o.Credit)
	assert.False(t, o.Duplicate)
	assert.InDelta(t, NetMM(60, c.Rate, c.Efficiency), o.CreditMM, 1e-12)
}

// A controller's clock may be a little off: a report within ReportClockSkew
// of the start is taken.
func TestReportWithinClockSkewOfStartTaken(t *testing.T) {
	c := testCommand()
	c.MarkSent(c.Start.Add(-time.Minute))
	_, err := c.Apply(Report{ID: c.ID, State: ReportStarted}, c.Start.Add(-ReportClockSkew/2), DefaultPolicy)
	require.NoError(t, err)
	assert.Equal(t, Started, c.State)
}

// A final report may not claim more minutes than have passed since the
// command's start (plus the clock skew): such a report is refused and the
// command stays open for the true one.
func TestReportMinutesBeyondElapsedRefused(t *testing.T) {
	p := DefaultPolicy
	c := testCommand()
	c.MarkSent(c.Start.Add(-time.Minute))
	_, err := c.Apply(Report{ID: c.ID, State: ReportFinished, MinutesRun: 600, HasMinutes: true}, c.Start.Add(10*time.Minute), p)
	require.Error(t, err)
	assert.Contains(t, err.Error(), "minutes_run")
	assert.Contains(t, err.Error(), "since the command's start")
	assert.Equal(t, Sent, c.State)

	// Without minutes_run a finished report claims the commanded 60 min, and
	// a metered volume the run it would take at the commanded flow.
	_, err = c.Apply(Report{ID: c.ID, State: ReportFinished}, c.Start.Add(10*time.Minute), p)
	require.Error(t, err)
	assert.Contains(t, err.Error(), "commanded 60 min")
	_, err = c.Apply(Report{ID: c.ID, State: ReportFinished, VolumeL: 1e15, HasVolume: true}, c.Start.Add(10*time.Second), p)
	require.Error(t, err)
	assert.Contains(t, err.Error(), "volume_l")
	assert.Equal(t, Sent, c.State)

	o, err := c.Apply(Report{ID: c.ID, State: ReportFinished, MinutesRun: 60, HasMinutes: true}, c.Start.Add(60*time.Minute), p)
	require.NoError(t, err)
	assert.True(t, o.Credit)
}

// Before the start a stopped report is taken only in answer to a stop the
// gateway asked for, and a failed one only when it claims no water (a
// controller refusing the command); a stopped report nobody asked for
// would mark the valve closed while the real controller runs it.
func TestStoppedBeforeStartNeedsAStop(t *testing.T) {
	p := DefaultPolicy
	early := func(c *Command) time.Time { return c.Start.Add(-ReportClockSkew - time.Minute) }

	c := testCommand()
	c.MarkSent(c.Start.Add(-5 * time.Minute))
	_, err := c.Apply(Report{ID: c.ID, State: ReportStopped, MinutesRun: 0, HasMinutes: true}, early(&c), p)
	require.Error(t, err)
	assert.Contains(t, err.Error(), "no stop was asked for")
	assert.Equal(t, Sent, c.State)

	_, err = c.RequestStop(early(&c).Add(-time.Second), "manual hold")
	require.NoError(t, err)
	o, err := c.Apply(Report{ID: c.ID, State: ReportStopped, MinutesRun: 0, HasMinutes: true}, early(&c), p)
	require.NoError(t, err)
	assert.Equal(t, Stopped, c.State)
	assert.Zero(t, o.CreditMM)

	c = testCommand()
	c.MarkSent(c.Start.Add(-5 * time.Minute))
	_, err = c.Apply(Report{ID: c.ID, State: ReportFailed, VolumeL: 50, HasVolume: true}, early(&c), p)
	require.Error(t, err, "water claimed before the start")
	assert.Equal(t, Sent, c.State)
	_, err = c.Apply(Report{ID: c.ID, State: ReportFailed, Reason: "valve unknown"}, early(&c), p)
	require.NoError(t, err)
	assert.Equal(t, Failed, c.State)
}

// Reports for a command never sent are refused whatever they claim.
func TestFinalReportForUnsentCommandRefused(t *testing.T) {
	for _, st := range []ReportState{ReportFinished, ReportStopped, ReportFailed} {
		c := testCommand()
		_, err := c.Apply(Report{ID: c.ID, State: st, MinutesRun: 30, HasMinutes: true}, c.Start.Add(time.Hour), DefaultPolicy)
		require.Error(t, err, st)
		assert.Contains(t, err.Error(), "never sent")
		assert.Equal(t, Planned, c.State)
	}
}
