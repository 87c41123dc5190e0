package pipeline

import (
	"path/filepath"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/ingest"
	"etpulse/hourly"
)

// The tests of this file are about the pipeline's sense of time: restarts,
// readings stamped far in the past or ahead of the gateway clock, readings
// without a time of their own, and station clocks that jump.

// upload feeds readings one message at a time, the pipeline clock moving
// 100 ms per message from start, ticking after each; it returns every record
// emitted and every rejection.
func upload(t *testing.T, p *Pipeline, start time.Time, rds []ingest.Reading) ([]hourly.Record, []ingest.Rejection) {
	t.Helper()
	var recs []hourly.Record
	var rejs []ingest.Rejection
	for i, r := range rds {
		now := start.Add(time.Duration(i) * 100 * time.Millisecond)
		res, err := p.Ingest(now, []ingest.Reading{r})
		require.NoError(t, err)
		recs = append(recs, res.Records...)
		rejs = append(rejs, res.Rejected...)
		out, err := p.Tick(now)
		require.NoError(t, err)
		recs = append(recs, out...)
	}
	return recs, rejs
}

// A restart during a backlog upload keeps the hours still to come: after a
// restart a station's latest arrival is the persisted one or the process
// start (the pipeline's first clock reading), whichever is later, so the
// first pass does not take the uploading station for a quiet one.
func TestRestartDuringBacklogKeepsComingHours(t *testing.T) {
	path := filepath.Join(t.TempDir(), "s.db")
	db := openDB(t, path)
	p, _ := newTestPipeline(t, db, Options{})
	rds := benchReadings(h10, h10.Add(3*time.Hour), 5*time.Minute)
	start := h10.Add(5 * time.Hour)
	n := len(rds) / 2
	recs, rejs := upload(t, p, start, rds[:n])

	// The gateway is down for an hour, then starts again and ticks at once.
	restart := start.Add(time.Hour)
	p, _ = newTestPipeline(t, db, Options{})
	out, err := p.Tick(restart)
	require.NoError(t, err)
	assert.Empty(t, out, "nothing is closed by silence at the restart")
	more, moreRejs := upload(t, p, restart.Add(time.Second), rds[n:])
	recs = append(append(recs, out...), more...)
	rejs = append(rejs, moreRejs...)

	assert.Empty(t, rejs, "no reading of the backlog is refused")
	assertBacklogHours(t, recs)
}

// assertBacklogHours asserts the records of a three-hour backlog from h10:
// 10:00 and 11:00 closed by the readings' clock, complete and once.
func assertBacklogHours(t *testing.T, recs []hourly.Record) {
	t.Helper()
	require.Len(t, recs, 2, "10:00 and 11:00 close by the readings' clock; 12:00 waits")
	for i, rec := range recs {
		assert.Equal(t, h10.Add(time.Duration(i)*time.Hour), rec.Start)
		assert.Zero(t, rec.Revision)
		assert.True(t, rec.Complete, rec.Flags)
		assert.NotContains(t, rec.Flags, FlagSilenceClose)
	}
}

// A persisted arrival later than the restart (the wall clock went back
// across the restart) still counts: silence is measured from it.
func TestRestartKeepsPersistedArrival(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	arrival := h10.Add(40 * time.Minute)
	_, err := p.Ingest(arrival, benchReadings(h10, h10.Add(40*time.Minute), 5*time.Minute))
	require.NoError(t, err)
	p, _ = newTestPipeline(t, db, Options{})
	out, err := p.Tick(h10.Add(20 * time.Minute))
	require.NoError(t, err)
	assert.Empty(t, out)
	assert.Equal(t, arrival.Add(15*time.Minute).Add(20*time.Minute), p.NextDeadline(),
		"hour 10 ends at 11:00, silence 15 min after the later of its end and the last arrival")
}

// A reading stamped far in the past (a device with an unset clock) on a
// new station does not start decades of hours: the next reading of the
// station drops it (too_old, more than the late window behind it), and
// when none comes, the station's silence does, by the wall clock.
func TestUnsetClockReadingOnNewStationDropped(t *testing.T) {
	unset := []ingest.Reading{{Site: "larkspur", Station: "bench",
		Sample: hourly.Sample{Sensor: "t", Quantity: hourly.AirTemp, Time: time.Unix(1, 0), Value: 20}}}
	now := h10.Add(30 * time.Minute)

	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	res, err := p.Ingest(now, unset)
	require.NoError(t, err)
	require.Equal(t, 1, res.Accepted, "alone it cannot be told from the start of a backlog")
	res, err = p.Ingest(now, benchReadings(h10, now, 5*time.Minute))
	require.NoError(t, err)
	require.Len(t, res.Rejected, 1, "the reading of 1970 is dropped")
	assert.Equal(t, ingest.ReasonTooOld, res.Rejected[0].Reason)
	assert.Contains(t, res.Rejected[0].Err.Error(), "late window")
	assert.Contains(t, res.Rejected[0].Err.Error(), "device clock")
	assert.Equal(t, 1.0, testutil.ToFloat64(p.m.rejected.WithLabelValues("larkspur", "bench", "too_old")))
	out, err := p.Tick(h10.Add(2 * time.Hour))
	require.NoError(t, err)
	require.Len(t, out, 1, "hour 10 closes by silence; nothing before it")
	assert.Equal(t, h10, out[0].Start)

	// Alone and followed by silence: dropped when the station is quiet,
	// and nothing is closed.
	p, _ = newTestPipeline(t, openDB(t, filepath.Join(t.TempDir(), "q.db")), Options{})
	_, err = p.Ingest(now, unset)
	require.NoError(t, err)
	out, err = p.Tick(now.Add(15 * time.Minute))
	require.NoError(t, err)
	assert.Empty(t, out)
	assert.Equal(t, 1.0, testutil.ToFloat64(p.m.rejected.WithLabelValues("larkspur", "bench", "too_old")))
	out, err = p.Tick(now.Add(3 * time.Hour))
	require.NoError(t, err)
	assert.Empty(t, out, "no first hour: nothing to close")
	assert.True(t, p.NextDeadline().IsZero())
}

// A station that has closed nothing keeps at most the late window open:
// when its first reading is far in the past and the pipeline clock could
// not tell (replay runs on the readings' clock), a later reading drops the
// hours more than the late window behind it (counted too_old) instead of
// closing every hour between; a reading further back than the late window
// behind the station's latest does not move its first hour back.
func TestFarPastFirstReadingBounded(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	old := h10.Add(-10 * 24 * time.Hour)
	first := benchReadings(old, old.Add(time.Minute), time.Minute)
	res, err := p.Ingest(old, first) // replay's clock: the batch's latest reading
	require.NoError(t, err)
	require.Equal(t, 4, res.Accepted)

	rds := benchReadings(h10, h10.Add(70*time.Minute), 5*time.Minute)
	res, err = p.Ingest(latest(rds), rds)
	require.NoError(t, err)
	assert.Len(t, res.Records, 1, "hour 10 closes; not 240 hours of nothing")
	assert.Equal(t, h10, res.Records[0].Start)
	require.Len(t, res.Rejected, 4, "the readings of ten days before are dropped")
	for _, r := range res.Rejected {
		assert.Equal(t, ingest.ReasonTooOld, r.Reason)
		assert.Contains(t, r.Err.Error(), "late window")
	}

	// Nothing closed yet on a new station: a reading more than the late
	// window behind its latest is refused, not taken as its first hour.
	fresh, _ := newTestPipeline(t, openDB(t, filepath.Join(t.TempDir(), "f.db")), Options{})
	_, err = fresh.Ingest(h10, benchReadings(h10, h10.Add(5*time.Minute), 5*time.Minute))
	require.NoError(t, err)
	res, err = fresh.Ingest(old, first)
	require.NoError(t, err)
	require.Len(t, res.Rejected, 4)
	assert.Equal(t, ingest.ReasonTooOld, res.Rejected[0].Reason)
	out, err := fresh.Flush()
	require.NoError(t, err)
	require.Len(t, out, 1)
	assert.Equal(t, h10, out[0].Start)
}

// arrivalStamped marks readings as carrying no time of their own.
func arrivalStamped(rds []ingest.Reading) []ingest.Reading {
	out := make([]ingest.Reading, len(rds))
	for i, r := range rds {
		r.ArrivalStamped = true
		out[i] = r
	}
	return out
}

// A reading without a time of its own, arriving while the station uploads a
// backlog of timestamped readings, does not move the station's clock to
// now: the backlog's hours still close by their own clock, complete, and no
// reading is refused.
func TestArrivalStampedReadingDuringBacklog(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	rds := benchReadings(h10, h10.Add(3*time.Hour), 5*time.Minute)
	start := h10.Add(5 * time.Hour)
	var msgs []ingest.Reading
	for i, r := range rds {
		msgs = append(msgs, r)
		if i == 20 {
			// A number-format sensor of the station reports now.
			at := start.Add(time.Duration(len(msgs)) * 100 * time.Millisecond)
			msgs = append(msgs, ingest.Reading{Site: "larkspur", Station: "bench", ArrivalStamped: true,
				Sample: hourly.Sample{Sensor: "t2", Quantity: hourly.AirTemp, Time: at, Value: 25}})
		}
	}
	recs, rejs := upload(t, p, start, msgs)
	assert.Empty(t, rejs)
	assertBacklogHours(t, recs)
}

// Live sensors without a time of their own (number payloads) still close
// their hours by their arrival times.
func TestArrivalStampedLiveStation(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	var recs []hourly.Record
	for at := h10; at.Before(h10.Add(2*time.Hour + 10*time.Minute)); at = at.Add(5 * time.Minute) {
		recs = append(recs, feed(t, p, at, arrivalStamped(benchReadings(at, at.Add(time.Minute), 5*time.Minute)))...)
	}
	require.Len(t, recs, 2)
	assert.True(t, recs[0].Complete)
	assert.True(t, recs[1].Complete)
	assert.Zero(t, recs[1].Revision)
}

// A station whose timestamped readings reach the gateway a few minutes
// after their time (a logger that publishes every few minutes) and that
// also has a sensor without a time key: the untimed readings do not close
// the hours ahead of the timed ones, so the timed ones are not late and no
// hour is revised.
func TestArrivalStampedNoRevisionStorm(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	lag := 8 * time.Minute
	var recs []hourly.Record
	for at := h10; at.Before(h10.Add(3 * time.Hour)); at = at.Add(time.Minute) {
		batch := []ingest.Reading{{Site: "larkspur", Station: "bench", ArrivalStamped: true,
			Sample: hourly.Sample{Sensor: "t2", Quantity: hourly.AirTemp, Time: at, Value: 25}}}
		if at.Add(-lag).Minute()%5 == 0 {
			batch = append(batch, benchReadings(at.Add(-lag), at.Add(-lag+time.Second), time.Minute)...)
		}
		recs = append(recs, feed(t, p, at, batch)...)
	}
	require.NotEmpty(t, recs)
	for _, r := range recs {
		assert.Zero(t, r.Revision, "hour %s revised", r.Start)
	}
	assert.Zero(t, testutil.ToFloat64(p.m.revisions.WithLabelValues("larkspur", "bench")))
}

// Pruning the closed-hour states of a station does not make it forget that
// it closed hours: late readings for them are too_old, never a new
// revision 0 of an hour already emitted.
func TestPrunedStationDoesNotReemitRevisionZero(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	recs := feed(t, p, h10.Add(2*time.Hour+5*time.Minute), benchReadings(h10, h10.Add(2*time.Hour+10*time.Minute), 5*time.Minute))
	require.Len(t, recs, 2)
	later := h10.Add(40 * time.Hour)
	require.NoError(t, p.prune(p.lookup("larkspur", "bench"), later))
	_, ok, err := p.Record("larkspur", "bench", h10)
	require.NoError(t, err)
	require.False(t, ok, "the hour states are pruned")

	res, err := p.Ingest(later, benchReadings(h10, h10.Add(10*time.Minute), 5*time.Minute))
	require.NoError(t, err)
	assert.Empty(t, res.Records)
	require.Len(t, res.Rejected, 8)
	for _, r := range res.Rejected {
		assert.Equal(t, ingest.ReasonTooOld, r.Reason)
	}
	out, err := p.Flush()
	require.NoError(t, err)
	for _, r := range out {
		assert.False(t, r.Start.Before(h10.Add(2*time.Hour)), "hour %s emitted again", r.Start)
	}
}

// Readings further ahead of the gateway clock than max_future (a box
// booted before its clock was set) are held durably, not dropped, and taken
// when the clock reaches them; a restart does not lose them.
func TestFutureReadingsHeldUntilClockReaches(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	behind := h10.Add(-3 * time.Hour) // the gateway clock
	rds := benchReadings(h10, h10.Add(70*time.Minute), 5*time.Minute)
	res, err := p.Ingest(behind, rds)
	require.NoError(t, err)
	assert.Empty(t, res.Rejected)
	assert.Equal(t, len(rds), res.Held)
	assert.Zero(t, res.Accepted)
	assert.Equal(t, float64(len(rds)), testutil.ToFloat64(p.m.held.WithLabelValues("larkspur", "bench")))

	p, _ = newTestPipeline(t, db, Options{}) // restart
	assert.Equal(t, h10.Add(-5*time.Minute), p.NextDeadline(), "the gateway wakes when the first held reading is due")
	assert.Equal(t, float64(len(rds)), testutil.ToFloat64(p.m.held.WithLabelValues("larkspur", "bench")), "the gauge counts held readings after a restart")
	out, err := p.Tick(behind.Add(time.Hour))
	require.NoError(t, err)
	assert.Empty(t, out)
	// The clock is set: everything held is within max_future now.
	out, err = p.Tick(h10.Add(65 * time.Minute))
	require.NoError(t, err)
	require.Len(t, out, 1)
	assert.Equal(t, h10, out[0].Start)
	assert.True(t, out[0].Complete, out[0].Flags)
	assert.Zero(t, testutil.ToFloat64(p.m.held.WithLabelValues("larkspur", "bench")))
}

// The holding bucket is bounded: beyond its limit readings are refused
// too_future with a message naming the limit, and counted.
func TestHeldReadingsBounded(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{HeldLimit: 5})
	rds := benchReadings(h10, h10.Add(10*time.Minute), 5*time.Minute) // 8 readings
	res, err := p.Ingest(h10.Add(-time.Hour), rds)
	require.NoError(t, err)
	assert.Equal(t, 5, res.Held)
	require.Len(t, res.Rejected, 3)
	for _, r := range res.Rejected {
		assert.Equal(t, ingest.ReasonTooFuture, r.Reason)
		assert.Contains(t, r.Err.Error(), "5 readings")
	}
	assert.Equal(t, 3.0, testutil.ToFloat64(p.m.rejected.WithLabelValues("larkspur", "bench", "too_future")))
}

// A station clock that jumps back an hour sends readings into a closed
// hour for the next hour; the hour is revised once after they stop (quiet
// for the close grace), not once per message.
func TestStationClockJumpBackRevisesOnce(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	var recs []hourly.Record
	jump := h10.Add(2*time.Hour + 10*time.Minute)
	for at := h10; at.Before(h10.Add(3*time.Hour + 30*time.Minute)); at = at.Add(5 * time.Minute) {
		stamp := at
		if !at.Before(jump) {
			stamp = at.Add(-time.Hour + 30*time.Second) // not the times already stored

		}
		for _, r := range benchReadings(stamp, stamp.Add(time.Second), time.Minute) {
			now := at.Add(time.Duration(len(recs)) * time.Millisecond)
			res, err := p.Ingest(now, []ingest.Reading{r})
			require.NoError(t, err)
			recs = append(recs, res.Records...)
			out, err := p.Tick(now)
			require.NoError(t, err)
			recs = append(recs, out...)
		}
	}
	revs := 0
	for _, r := range recs {
		if r.Revision > 0 {
			revs++
			assert.Equal(t, h10.Add(time.Hour), r.Start)
		}
	}
	assert.Equal(t, 1, revs, "hour 11 is revised once")
	assert.Equal(t, 1.0, testutil.ToFloat64(p.m.revisions.WithLabelValues("larkspur", "bench")))
}
