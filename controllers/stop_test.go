package controllers

import (
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"pgregory.net/rapid"
)

// startedCommand is testCommand sent one minute before its start and
// reported started at its start.
func startedCommand(t *testing.T) Command {
	t.Helper()
	c := testCommand()
	c.MarkSent(c.Start.Add(-time.Minute))
	_, err := c.Apply(Report{ID: c.ID, State: ReportStarted}, c.Start, DefaultPolicy)
	require.NoError(t, err)
	return c
}

// TestStopPartialRunCredited: a hold 25 minutes into a 60-minute run; the
// stop goes out at once, the controller answers stopped with the minutes it
// ran, which are credited once and charged against the day.
func TestStopPartialRunCredited(t *testing.T) {
	p := DefaultPolicy
	c := startedCommand(t)
	now := c.Start.Add(25 * time.Minute)
	changed, err := c.RequestStop(now, "hold: storm")
	require.NoError(t, err)
	assert.True(t, changed)
	assert.True(t, c.Stopping())
	changed, err = c.RequestStop(now.Add(time.Second), "hold: again")
	require.NoError(t, err)
	assert.False(t, changed, "a second stop request changes nothing")
	assert.Equal(t, "hold: storm", c.StopReason)

	assert.Equal(t, now, c.NextWake(p))
	require.Equal(t, SendStop, c.Due(now, p))
	c.MarkStopSent(now)
	assert.Equal(t, None, c.Due(now.Add(time.Minute), p))
	assert.Equal(t, now.Add(p.AckTimeout), c.NextWake(p))

	// 25 minutes at 0.8 mm/h x 0.9: 25/60 x 0.8 x 0.9 = 0.3 mm net.
	o, err := c.Apply(Report{ID: c.ID, State: ReportStopped, MinutesRun: 25, HasMinutes: true}, now.Add(10*time.Second), DefaultPolicy)
	require.NoError(t, err)
	assert.True(t, o.Credit)
	assert.InDelta(t, 0.3, o.CreditMM, 1e-12)
	assert.Equal(t, Stopped, c.State)
	assert.False(t, c.State.Open())
	assert.False(t, c.Stopping())
	assert.Equal(t, 25, c.chargedMinutes())

	// Repeats credit nothing, and nothing is ever sent again.
	for _, st := range []ReportState{ReportStopped, ReportFinished, ReportFailed} {
		o, err = c.Apply(Report{ID: c.ID, State: st, MinutesRun: 25, HasMinutes: true}, now.Add(time.Minute), DefaultPolicy)
		require.NoError(t, err)
		assert.True(t, o.Duplicate)
		assert.False(t, o.Credit)
	}
	for _, d := range []time.Duration{time.Minute, time.Hour, 48 * time.Hour} {
		assert.Equal(t, None, c.Due(now.Add(d), p))
	}
	assert.True(t, c.NextWake(p).IsZero())
}

// TestStopAnsweredFinished: the controller may answer a stop with finished
// and the minutes actually run; that is credited as usual.
func TestStopAnsweredFinished(t *testing.T) {
	c := startedCommand(t)
	now := c.Start.Add(40 * time.Minute)
	_, err := c.RequestStop(now, "rain delay")
	require.NoError(t, err)
	c.MarkStopSent(now)
	// 40/60 x 0.8 x 0.9 = 0.48 mm.
	o, err := c.Apply(Report{ID: c.ID, State: ReportFinished, MinutesRun: 40, HasMinutes: true}, now.Add(5*time.Second), DefaultPolicy)
	require.NoError(t, err)
	assert.InDelta(t, 0.48, o.CreditMM, 1e-12)
	assert.Equal(t, Finished, c.State)
	assert.Equal(t, None, c.Due(now.Add(time.Hour), DefaultPolicy))
}

// TestStopRepeatedUntilAnswered: a controller that never answers the stop
// gets it AckTimeout apart for the usual MaxAttempts, then less and less
// often (at most maxStopInterval apart), for as long as it stays silent: the
// valve may be open. The command is never quietly expired, never sent
// again, and a late stopped report is credited once.
func TestStopRepeatedUntilAnswered(t *testing.T) {
	p := DefaultPolicy // 3 attempts, 2 minutes apart
	c := testCommand()
	sentAt := c.Start.Add(-time.Minute)
	c.MarkSent(sentAt)
	// The hold comes before any report; the command itself had 1 attempt.
	now := sentAt.Add(30 * time.Second)
	_, err := c.RequestStop(now, "hold")
	require.NoError(t, err)
	var stops []time.Time
	for t0 := now; t0.Before(now.Add(3 * time.Hour)); t0 = t0.Add(10 * time.Second) {
		switch c.Due(t0, p) {
		case SendStop:
			c.MarkStopSent(t0)
			stops = append(stops, t0)
		case None:
		default:
			t.Fatalf("unexpected %v at %v while stopping", c.Due(t0, p), t0)
		}
	}
	// 2, 2, then 4, 8, 16, 30, 30, ... minutes apart.
	require.Greater(t, len(stops), 8)
	assert.Equal(t, []time.Time{now, now.Add(2 * time.Minute), now.Add(4 * time.Minute), now.Add(8 * time.Minute),
		now.Add(16 * time.Minute), now.Add(32 * time.Minute), now.Add(62 * time.Minute)}, stops[:7])
	assert.Equal(t, Sent, c.State)
	assert.True(t, c.Stopping())
	assert.Equal(t, 1, c.Attempts, "the run command itself was never sent again")
	assert.Equal(t, 60, c.chargedMinutes(), "may have run: counts in full")

	o, err := c.Apply(Report{ID: c.ID, State: ReportStopped, MinutesRun: 0, HasMinutes: true}, now.Add(3*time.Hour), DefaultPolicy)
	require.NoError(t, err)
	assert.True(t, o.Credit)
	assert.Zero(t, o.CreditMM)
	assert.Equal(t, Stopped, c.State)
	assert.False(t, c.Stopping())
	assert.Equal(t, 0, c.chargedMinutes())
	o, _ = c.Apply(Report{ID: c.ID, State: ReportStopped, MinutesRun: 0, HasMinutes: true}, now.Add(3*time.Hour), DefaultPolicy)
	assert.True(t, o.Duplicate)
}

// TestStopWithoutFigures: a stopped report without minutes or volume is
// credited for the time since the started report, at most the commanded
// minutes, and nothing when the command never started.
func TestStopWithoutFigures(t *testing.T) {
	c := startedCommand(t)
	// Stopped 30 minutes after started: 30/60 x 0.8 x 0.9 = 0.36 mm.
	o, err := c.Apply(Report{ID: c.ID, State: ReportStopped}, c.Start.Add(30*time.Minute), DefaultPolicy)
	require.NoError(t, err)
	assert.InDelta(t, 0.36, o.CreditMM, 1e-12)
	assert.InDelta(t, 30, c.MinutesRun, 1e-12)
	assert.Contains(t, c.Note, "estimated")
	assert.Equal(t, 60, c.chargedMinutes(), "estimated minutes: the day is charged in full")

	c = startedCommand(t)
	o, _ = c.Apply(Report{ID: c.ID, State: ReportStopped}, c.Start.Add(3*time.Hour), DefaultPolicy)
	assert.InDelta(t, 0.72, o.CreditMM, 1e-12, "at most the commanded 60 minutes")

	c = testCommand()
	c.MarkSent(c.Start.Add(-time.Minute))
	o, _ = c.Apply(Report{ID: c.ID, State: ReportStopped}, c.Start.Add(10*time.Minute), DefaultPolicy)
	assert.True(t, o.Credit)
	assert.Zero(t, o.CreditMM, "never started: nothing credited")
}

// TestStopOnlyRunningCommands: planned commands are cancelled, not stopped;
// closed ones cannot be stopped.
func TestStopOnlyRunningCommands(t *testing.T) {
	c := testCommand()
	_, err := c.RequestStop(c.Start, "hold")
	assert.ErrorIs(t, err, ErrInput)
	c = startedCommand(t)
	_, err = c.Apply(Report{ID: c.ID, State: ReportFinished}, c.Start.Add(time.Hour), DefaultPolicy)
	require.NoError(t, err)
	_, err = c.RequestStop(c.Start.Add(time.Hour), "hold")
	assert.ErrorIs(t, err, ErrInput)
	assert.True(t, c.StopAt.IsZero())
}

// TestPropertyStopNeverResends: whatever reports arrive and whenever the
// scheduler looks, a command asked to stop is never sent again, its stops
// are never closer than the stop interval, no stop goes out once a final
// report came, and water is credited at most once.
func TestPropertyStopNeverResends(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		p := DefaultPolicy
		p.MaxAttempts = rapid.IntRange(1, 5).Draw(t, "attempts")
		c := testCommand()
		now := c.Start.Add(-p.SendLead)
		c.MarkSent(now)
		stopAfter := rapid.IntRange(0, 30).Draw(t, "stopAfter")
		credits := 0
		stopped := false
		for step := range 200 {
			now = now.Add(time.Duration(rapid.IntRange(1, 90).Draw(t, "dt")) * time.Second)
			if step == stopAfter && c.State.Open() {
				_, err := c.RequestStop(now, "hold")
				if err != nil {
					t.Fatalf("request stop in state %s: %v", c.State, err)
				}
				stopped = true
			}
			switch c.Due(now, p) {
			case Send:
				if stopped {
					t.Fatalf("command sent again after the stop (state %s)", c.State)
				}
				c.MarkSent(now)
			case SendStop:
				if !c.MayRun() {
					t.Fatalf("stop sent in state %s", c.State)
				}
				if c.StopAttempts > 0 && now.Sub(c.StopSentAt) < stopInterval(c.StopAttempts, p) {
					t.Fatalf("stop %d only %v after the previous one", c.StopAttempts+1, now.Sub(c.StopSentAt))
				}
				c.MarkStopSent(now)
			case StopSilent:
				if _, err := c.RequestStop(now, "silent"); err != nil {
					t.Fatalf("silent stop in state %s: %v", c.State, err)
				}
				stopped = true
				c.MarkStopSent(now)
			case Expire:
				c.MarkExpired(now, "no report")
			}
			if rapid.IntRange(0, 9).Draw(t, "report?") == 0 {
				st := rapid.SampledFrom([]ReportState{ReportAccepted, ReportStarted, ReportFinished, ReportFailed, ReportStopped}).Draw(t, "state")
				before := c
				o, err := c.Apply(Report{ID: c.ID, State: st, MinutesRun: 10, HasMinutes: true}, now, DefaultPolicy)
				if errors.Is(err, ErrInput) && (strings.Contains(err.Error(), "since the command's start") || strings.Contains(err.Error(), "before the command's start")) {
					// Cannot be true at now (checkTiming): refused, nothing changed.
					if c != before {
						t.Fatalf("refused %s report changed the command", st)
					}
					continue
				}
				if err != nil {
					t.Fatalf("apply %s: %v", st, err)
				}
				if o.Credit {
					credits++
				}
			}
		}
		if credits > 1 {
			t.Fatalf("credited %d times", credits)
		}
	})
}
