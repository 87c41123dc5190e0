package controllers

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func testCommand() Command {
	start := at(1, 21, 1)
	return Command{ID: CommandID("kestrel-b3", start, 1), Zone: "kestrel-b3", Valve: "v3", Minutes: 60,
		Start: start, Expiry: start.Add(15 * time.Minute), Cycle: 1, Cycles: 1,
		Rate: 0.8, Efficiency: 0.9, Area: 5000, State: Planned}
}

func TestLedgerHappyPath(t *testing.T) {
	p := DefaultPolicy
	c := testCommand()
	assert.Equal(t, "kestrel-b3-20260702T0501Z-c1", c.ID)
	assert.Equal(t, None, c.Due(c.Start.Add(-2*time.Minute), p))
	assert.Equal(t, c.Start.Add(-time.Minute), c.NextWake(p))
	now := c.Start.Add(-time.Minute)
	require.Equal(t, Send, c.Due(now, p))
	c.MarkSent(now)
	assert.Equal(t, Sent, c.State)
	assert.Equal(t, None, c.Due(now.Add(time.Minute), p))

	o, err := c.Apply(Report{ID: c.ID, State: ReportAccepted}, now.Add(10*time.Second), DefaultPolicy)
	require.NoError(t, err)
	assert.True(t, o.Changed)
	o, _ = c.Apply(Report{ID: c.ID, State: ReportAccepted}, now.Add(20*time.Second), DefaultPolicy)
	assert.True(t, o.Duplicate)
	o, _ = c.Apply(Report{ID: c.ID, State: ReportStarted}, c.Start, DefaultPolicy)
	assert.True(t, o.Changed)
	assert.Equal(t, c.Start.Add(75*time.Minute), c.NextWake(p)) // 60 minutes + 15 grace

	// Finished with minutes: 60/60 x 0.8 mm/h x 0.9 = 0.72 mm net.
	o, err = c.Apply(Report{ID: c.ID, State: ReportFinished, MinutesRun: 60, HasMinutes: true}, c.Start.Add(time.Hour), DefaultPolicy)
	require.NoError(t, err)
	assert.True(t, o.Credit)
	assert.InDelta(t, 0.72, o.CreditMM, 1e-12)
	// The duplicate finished report credits nothing.
	o, _ = c.Apply(Report{ID: c.ID, State: ReportFinished, MinutesRun: 60, HasMinutes: true}, c.Start.Add(time.Hour), DefaultPolicy)
	assert.True(t, o.Duplicate)
	assert.False(t, o.Credit)
	assert.Equal(t, None, c.Due(c.Start.Add(48*time.Hour), p), "a finished command is never sent again")
	assert.True(t, c.NextWake(p).IsZero())
}

func TestLedgerVolumeCredit(t *testing.T) {
	c := testCommand()
	c.MarkSent(c.Start)
	// A meter reading of 4000 L on 5000 m2 = 0.8 mm gross; x 0.9 = 0.72 mm net.
	o, err := c.Apply(Report{ID: c.ID, State: ReportFinished, MinutesRun: 55, HasMinutes: true, VolumeL: 4000, HasVolume: true}, c.Start.Add(55*time.Minute), DefaultPolicy)
	require.NoError(t, err)
	assert.InDelta(t, 0.72, o.CreditMM, 1e-12)
}

func TestLedgerRetryAndExpiry(t *testing.T) {
	p := DefaultPolicy // 3 attempts, 2 min apart, expiry 15 min after start
	c := testCommand()
	now := c.Start.Add(-time.Minute)
	c.MarkSent(now)
	now = now.Add(2 * time.Minute)
	require.Equal(t, Send, c.Due(now, p))
	c.MarkSent(now)
	now = now.Add(2 * time.Minute)
	require.Equal(t, Send, c.Due(now, p))
	c.MarkSent(now)
	assert.Equal(t, 3, c.Attempts)
	assert.Equal(t, None, c.Due(now.Add(5*time.Minute), p), "no fourth attempt")
	assert.Equal(t, c.Expiry, c.NextWake(p))
	require.Equal(t, Expire, c.Due(c.Expiry, p))
	c.MarkExpired(c.Expiry, "no report")
	assert.Equal(t, None, c.Due(c.Expiry.Add(time.Hour), p))

	// A late finished report (the water did run) is credited once.
	o, err := c.Apply(Report{ID: c.ID, State: ReportFinished}, c.Expiry.Add(time.Hour), DefaultPolicy)
	require.NoError(t, err)
	assert.True(t, o.Late)
	assert.InDelta(t, 0.72, o.CreditMM, 1e-12) // commanded minutes assumed
	o, _ = c.Apply(Report{ID: c.ID, State: ReportFinished}, c.Expiry.Add(time.Hour), DefaultPolicy)
	assert.False(t, o.Credit)
}

func TestLedgerFailure(t *testing.T) {
	c := testCommand()
	c.MarkSent(c.Start)
	// Failed after 20 minutes: 20/60 x 0.8 x 0.9 = 0.24 mm credited.
	o, err := c.Apply(Report{ID: c.ID, State: ReportFailed, MinutesRun: 20, HasMinutes: true, Reason: "low pressure"}, c.Start.Add(20*time.Minute), DefaultPolicy)
	require.NoError(t, err)
	assert.InDelta(t, 0.24, o.CreditMM, 1e-12)
	assert.Equal(t, Failed, c.State)
	assert.Equal(t, "low pressure", c.Note)
	assert.Equal(t, 20, c.chargedMinutes())
	// Failed without any figure: nothing credited, full minutes charged.
	c2 := testCommand()
	o, _ = c2.Apply(Report{ID: c2.ID, State: ReportFailed}, c2.Start, DefaultPolicy)
	assert.Zero(t, o.CreditMM)
	assert.Equal(t, 60, c2.chargedMinutes())
}

func TestLedgerBadReports(t *testing.T) {
	c := testCommand()
	for _, r := range []Report{
		{ID: c.ID, State: "done"},
		{ID: "", State: ReportFinished},
		{ID: c.ID, State: ReportFinished, HasMinutes: true, MinutesRun: -1},
		{ID: c.ID, State: ReportFinished, HasVolume: true, VolumeL: -5},
		{ID: "other", State: ReportFinished},
	} {
		_, err := c.Apply(r, c.Start, DefaultPolicy)
		assert.ErrorIs(t, err, ErrInput, "%+v", r)
	}
	assert.Equal(t, Planned, c.State)
	require.NoError(t, c.Cancel(c.Start, "hold"))
	_, err := c.Apply(Report{ID: c.ID, State: ReportAccepted}, c.Start, DefaultPolicy)
	assert.ErrorIs(t, err, ErrInput)
	assert.Zero(t, c.chargedMinutes())
}
