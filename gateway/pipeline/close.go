package pipeline

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"time"

	"go.etcd.io/bbolt"

	"etpulse/gateway/ingest"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// Flags the pipeline writes into records.
const (
	FlagFcdDefault   = hourly.FlagFcdDefault     // no usable carried cloudiness; hourly's default was used (see hourly.Result.Flags for the others)
	FlagETStopped    = "et:stopped"              // the quality gate stopped ET for the hour
	FlagSolarFill    = "solar:hargreaves-samani" // solar excluded, Hargreaves-Samani estimate used
	FlagSilenceClose = "closed:silence"          // closed by the wall clock, the station had gone quiet
	flagIncomplete   = "incomplete:"             // + quantity
	flagError        = "error:"                  // + aggregate | compute
)

// hourStatsKeep is how long closed-hour states are kept at least: the
// Hargreaves-Samani fill needs the last 24 hours' temperature range.
const hourStatsKeep = 25 * time.Hour

// Tick closes every hour that is due at now and re-emits every closed hour
// that received late readings, each in its own transaction, and prunes
// samples older than the late window. It visits only the stations with
// something due (see deadlines). It returns the records it emitted, in
// order; they are also kept as pending until MarkPublished.
func (p *Pipeline) Tick(now time.Time) ([]hourly.Record, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.startClock(now)
	due := p.takeDue(now)
	defer func() {
		for _, st := range due {
			p.schedule(st)
		}
	}()
	var out []hourly.Record
	var errs []error
	recs, err := p.admitHeld(now, due)
	out = append(out, recs...)
	if err != nil {
		errs = append(errs, err)
	}
	out = append(out, p.closeTogether(due, now, nil)...)
	var pruning []*station
	for _, st := range due {
		recs, err := p.tickStation(st, now)
		out = append(out, recs...)
		if err != nil {
			errs = append(errs, fmt.Errorf("station %s/%s: %w", st.site, st.id, err))
		}
		if st.pruneSoon || (!st.pruneAt.IsZero() && !now.Before(st.pruneAt)) {
			pruning = append(pruning, st)
		}
	}
	if err := p.pruneAll(pruning, now); err != nil {
		errs = append(errs, err)
	}
	return out, errors.Join(errs...)
}

// closeTogetherMax bounds the hours closed in one transaction.
const closeTogetherMax = 4096

// closeTogether closes the due hours of several stations in a few
// transactions instead of one each: in rounds, each round the earliest due
// hour of every station in one transaction (so each hour's quality gate is
// asked after the station's previous hour closed, as closeDue does). A
// failed round is left to closeDue, station by station. A station whose
// first hour trimQuiet would trim is left to it too. Hours are due by the
// station's watermark (or its entry in marks, when marks is not nil) and,
// when now is not zero, by silence (see closeDue).
func (p *Pipeline) closeTogether(due []*station, now time.Time, marks map[*station]time.Time) []hourly.Record {
	type job struct {
		st     *station
		hour   time.Time
		silent bool
		gate   Gate
	}
	var out []hourly.Record
	for {
		var jobs []job
		for _, st := range due {
			if !st.hasCursor || len(jobs) == closeTogetherMax {
				continue
			}
			end := st.cursor.Add(time.Hour)
			if !now.IsZero() && !st.closed && now.Sub(end) > st.cfg.LateWindow.D() {
				continue // trimQuiet's
			}
			wm := st.watermark
			if marks != nil {
				wm = marks[st]
			}
			byData := !wm.Before(end.Add(st.cfg.CloseGrace.D()))
			if byData || (!now.IsZero() && st.silent(end, now)) {
				jobs = append(jobs, job{st, st.cursor, !byData, p.gateFor(st, st.cursor)})
			}
		}
		if len(jobs) < 2 {
			return out // one station: closeDue
		}
		recs := make([]hourly.Record, len(jobs))
		err := p.db.Update(func(tx *bbolt.Tx) error {
			for i, j := range jobs {
				var err error
				if recs[i], err = p.closeHourTx(tx, j.st, j.hour, j.silent, j.gate); err != nil {
					return fmt.Errorf("station %s/%s: %w", j.st.site, j.st.id, err)
				}
			}
			return nil
		})
		if err != nil {
			p.log.Error("closing hours together failed; closing them station by station", "hours", len(jobs), "err", err)
			return out
		}
		for i, j := range jobs {
			p.closedHour(j.st, j.hour, recs[i])
			out = append(out, recs[i])
		}
	}
}

func (p *Pipeline) tickStation(st *station, now time.Time) ([]hourly.Record, error) {
	if err := p.trimQuiet(st, now); err != nil {
		return nil, err
	}
	out, err := p.closeDue(st, st.watermark, now)
	if err != nil {
		return out, err
	}
	if st.dirty && !now.Before(st.reviseAt) {
		recs, waiting, err := p.revise(st, now)
		out = append(out, recs...)
		if err != nil {
			st.reviseAt = time.Time{} // retried at the next pass
			return out, err
		}
		st.dirty = waiting
	}
	return out, nil
}

// closeDue closes, in order, every open hour of the station that the
// watermark has passed by the close grace or, when now is not zero, that the
// wall clock has passed by the silence timeout after both the hour's end and
// the station's latest arrival.
func (p *Pipeline) closeDue(st *station, watermark, now time.Time) ([]hourly.Record, error) {
	var out []hourly.Record
	grace := st.cfg.CloseGrace.D()
	for st.hasCursor {
		end := st.cursor.Add(time.Hour)
		byData := !watermark.Before(end.Add(grace))
		bySilence := !now.IsZero() && st.silent(end, now)
		if !byData && !bySilence {
			break
		}
		rec, err := p.closeHour(st, st.cursor, !byData)
		if err != nil {
			return out, err
		}
		out = append(out, rec)
	}
	return out, nil
}

// closeHour closes the station's hour at st.cursor in one transaction.
func (p *Pipeline) closeHour(st *station, hour time.Time, silent bool) (hourly.Record, error) {
	gate := p.gateFor(st, hour)
	var rec hourly.Record
	err := p.db.Update(func(tx *bbolt.Tx) error {
		var err error
		rec, err = p.closeHourTx(tx, st, hour, silent, gate)
		return err
	})
	if err != nil {
		return hourly.Record{}, err
	}
	p.closedHour(st, hour, rec)
	return rec, nil
}

// closeHourTx closes the station's hour at hour inside tx; closedHour
// follows the commit.
func (p *Pipeline) closeHourTx(tx *bbolt.Tx, st *station, hour time.Time, silent bool, gate Gate) (hourly.Record, error) {
	var rec hourly.Record
	err := func() error {
		sb, err := st.buckets(tx)
		if err != nil {
			return err
		}
		var cj state.Carry
		if _, err := getJSON(sb.meta, keyCarry, &cj); err != nil {
			return err
		}
		carryIn := cj.Hourly()
		var tmin, tmax *float64
		rec, tmin, tmax, err = p.build(sb, st, hour, carryIn, gate)
		if err != nil {
			return err
		}
		if silent {
			rec.Flags = append(rec.Flags, FlagSilenceClose)
		}
		hs := hourState{CarryIn: state.CarryOf(carryIn)}
		if err := p.commitHour(tx, sb, st, rec, hs, tmin, tmax, true); err != nil {
			return err
		}
		if err := putTime(sb.meta, keyClosedThrough, hour.Add(time.Hour)); err != nil {
			return err
		}
		return putTime(sb.meta, keyCursor, hour.Add(time.Hour))
	}()
	if err != nil {
		return hourly.Record{}, fmt.Errorf("close hour %s: %w", hour.Format(time.RFC3339), err)
	}
	return rec, nil
}

// closedHour updates the station's mirror after its hour at hour closed.
func (p *Pipeline) closedHour(st *station, hour time.Time, rec hourly.Record) {
	st.cursor, st.closed = hour.Add(time.Hour), true
	if st.pruneAt.IsZero() {
		st.pruneSoon = true // samples held back by the cursor may go now
	}
	p.m.closed.WithLabelValues(st.site, st.id, strconv.FormatBool(rec.Complete)).Inc()
	p.observeRecord(st, rec)
}

// revise re-emits every closed hour of the station marked dirty. When now
// is not zero, an hour whose latest late reading came less than the close
// grace before now waits (waiting reports that one did): a burst of late
// readings, e.g. from a station clock that jumped back, gives one revision,
// not one per message.
func (p *Pipeline) revise(st *station, now time.Time) ([]hourly.Record, bool, error) {
	var hours []time.Time
	waiting := false
	var next time.Time // the earliest waiting hour's deadline
	if err := p.db.View(func(tx *bbolt.Tx) error {
		sb, err := st.buckets(tx)
		if err != nil {
			return err
		}
		return sb.hours.ForEach(func(k, v []byte) error {
			var hs hourState
			if _, err := getJSON(sb.hours, k, &hs); err != nil {
				return err
			}
			switch {
			case !hs.Dirty:
			case !now.IsZero() && now.Sub(hs.LateAt) < st.cfg.CloseGrace.D():
				waiting = true
				if at := hs.LateAt.Add(st.cfg.CloseGrace.D()); next.IsZero() || at.Before(next) {
					next = at
				}
			default:
				hours = append(hours, hourFromKey(k))
			}
			return nil
		})
	}); err != nil {
		return nil, true, err
	}
	st.reviseAt = next
	var out []hourly.Record
	for _, hour := range hours {
		gate := p.gateFor(st, hour)
		var rec hourly.Record
		err := p.db.Update(func(tx *bbolt.Tx) error {
			sb, err := st.buckets(tx)
			if err != nil {
				return err
			}
			var hs hourState
			if _, err := getJSON(sb.hours, hourKey(hour), &hs); err != nil {
				return err
			}
			var tmin, tmax *float64
			rec, tmin, tmax, err = p.build(sb, st, hour, hs.CarryIn.Hourly(), gate)
			if err != nil {
				return err
			}
			rec.Revision = hs.Revision + 1
			if hs.Record != nil && slices.Contains(hs.Record.Flags, FlagSilenceClose) {
				rec.Flags = append(rec.Flags, FlagSilenceClose)
			}
			// Only the latest closed hour passes its carry on: later hours
			// have used the old one already.
			return p.commitHour(tx, sb, st, rec, hs, tmin, tmax, hour.Add(time.Hour).Equal(st.cursor))
		})
		if err != nil {
			return out, true, fmt.Errorf("revise hour %s: %w", hour.Format(time.RFC3339), err)
		}
		p.m.revisions.WithLabelValues(st.site, st.id).Inc()
		p.observeRecord(st, rec)
		out = append(out, rec)
	}
	return out, waiting, nil
}

// trimQuiet bounds, by the wall clock, the open hours of a quiet station
// that has closed nothing yet: when it has been silent (see station.silent)
// its readings of hours that ended more than the late window before now are
// dropped (counted too_old) and its first hour becomes the earliest kept
// reading's; when none is kept it has no first hour until its next reading.
// So a lone reading stamped decades ago (a device with an unset clock) is
// dropped instead of starting decades of empty hours.
func (p *Pipeline) trimQuiet(st *station, now time.Time) error {
	lw := st.cfg.LateWindow.D()
	end := st.cursor.Add(time.Hour)
	if st.closed || !st.hasCursor || now.Sub(end) <= lw || !st.silent(end, now) {
		return nil
	}
	var rejs []ingest.Rejection
	var cursor time.Time
	if err := p.db.Update(func(tx *bbolt.Tx) error {
		sb, err := st.buckets(tx)
		if err != nil {
			return err
		}
		if rejs, err = dropBefore(sb, st, st.hourStart(now.Add(-lw)), lw, "the gateway clock "+now.UTC().Format(time.RFC3339)); err != nil {
			return err
		}
		k, _ := sb.samples.Cursor().First()
		if k == nil {
			return sb.meta.Delete(keyCursor)
		}
		cursor = hourFromKey(k)
		return putTime(sb.meta, keyCursor, cursor)
	}); err != nil {
		return fmt.Errorf("drop readings older than the late window: %w", err)
	}
	st.cursor, st.hasCursor = cursor, !cursor.IsZero()
	for _, r := range rejs {
		p.m.rejected.WithLabelValues(labels(st.site, st.id, string(r.Reason))...).Inc()
		p.rejects.note(now, stationLabel(st.id), r)
	}
	return nil
}

// latestOf returns the later of a and b.
func latestOf(a, b time.Time) time.Time {
	if b.After(a) {
		return b
	}
	return a
}

// admitHeld takes, for the due stations, the held readings that the gateway clock has reached
// (within max_future of now) through Ingest and removes them from the held
// bucket. A crash between the two takes them again at the next start: they
// are then duplicates, dropped.
func (p *Pipeline) admitHeld(now time.Time, due []*station) ([]hourly.Record, error) {
	var out []hourly.Record
	for _, st := range due {
		if st.held == 0 {
			continue
		}
		lim := now.Add(st.cfg.MaxFuture.D())
		var rds []ingest.Reading
		var keys [][]byte
		var next, arrived time.Time
		if err := p.db.View(func(tx *bbolt.Tx) error {
			sb, err := st.buckets(tx)
			if err != nil {
				return err
			}
			c := sb.held.Cursor()
			for k, v := c.First(); len(k) >= 8; k, v = c.Next() {
				at := time.Unix(0, int64(binary.BigEndian.Uint64(k[:8]))).UTC()
				if at.After(lim) {
					next = at
					break
				}
				var h heldReading
				if err := jsonUnmarshal(v, &h); err != nil {
					return fmt.Errorf("held reading: %w", err)
				}
				rds = append(rds, ingest.Reading{Site: st.site, Station: st.id, Counter: h.Counter, Rollover: h.Rollover,
					Sample: hourly.Sample{Sensor: string(k[8:]), Quantity: h.Quantity, Time: at, Value: h.Value}})
				if h.Arrival.After(arrived) {
					arrived = h.Arrival
				}
				keys = append(keys, append([]byte(nil), k...))
			}
			return nil
		}); err != nil {
			return out, fmt.Errorf("station %s/%s: held readings: %w", st.site, st.id, err)
		}
		if len(rds) == 0 {
			continue
		}
		// They arrived when they were held: the station is as quiet as it
		// was, and they were stamped by the station's clock then.
		prevArrival, prevStamped := st.arrival, st.stampedArrival
		res, err := p.ingest(now, rds)
		st.arrival, st.stampedArrival = latestOf(prevArrival, arrived), latestOf(prevStamped, arrived)
		out = append(out, res.Records...)
		if err != nil {
			return out, fmt.Errorf("station %s/%s: admit held readings: %w", st.site, st.id, err)
		}
		if err := p.db.Update(func(tx *bbolt.Tx) error {
			sb, err := st.buckets(tx)
			if err != nil {
				return err
			}
			for _, k := range keys {
				if err := sb.held.Delete(k); err != nil {
					return err
				}
			}
			return nil
		}); err != nil {
			return out, fmt.Errorf("station %s/%s: remove admitted held readings: %w", st.site, st.id, err)
		}
		st.held, st.heldFirst = st.held-len(keys), next
		p.m.held.WithLabelValues(st.site, st.id).Set(float64(st.held))
		p.log.Info("held readings admitted", "station", st.id, "count", len(keys))
	}
	return out, nil
}

// commitHour hands the record to every HourHandler inside tx, then stores
// the hour's state, the station's carry (when passCarry) and the pending
// record. hs carries the hour's carry-in; its other fields are replaced.
func (p *Pipeline) commitHour(tx *bbolt.Tx, sb stationBuckets, st *station, rec hourly.Record, hs hourState, tmin, tmax *float64, passCarry bool) error {
	for _, h := range p.handlers {
		if err := h.HandleHour(tx, rec); err != nil {
			return fmt.Errorf("hour handler: %w", err)
		}
	}
	j := state.RecordOf(rec)
	hs.Revision, hs.Dirty, hs.TMin, hs.TMax, hs.Record = rec.Revision, false, tmin, tmax, &j
	if err := putJSON(sb.hours, hourKey(rec.Start), hs); err != nil {
		return err
	}
	if passCarry {
		if err := putJSON(sb.meta, keyCarry, state.CarryOf(rec.Carry)); err != nil {
			return err
		}
	}
	return putPending(tx, st, rec)
}

func (p *Pipeline) observeRecord(st *station, rec hourly.Record) {
	if rec.Result != nil {
		p.m.lastET.WithLabelValues(st.site, st.id, string(rec.Reference)).Set(rec.Result.ET)
	}
	p.m.lastClosed.WithLabelValues(st.site, st.id).Set(float64(rec.End.Unix()))
}

func (p *Pipeline) gateFor(st *station, hour time.Time) Gate {
	if p.gate == nil {
		return Gate{}
	}
	return p.gate.Gate(st.site, st.id, hour)
}

// build aggregates and computes one hour from its stored samples. It returns
// the record (revision 0) and the hour's air temperature range when known.
func (p *Pipeline) build(sb stationBuckets, st *station, hour time.Time, carryIn hourly.Carry, gate Gate) (hourly.Record, *float64, *float64, error) {
	rec := hourly.Record{
		Site: st.site, Station: st.id, Reference: st.cfg.Reference,
		Start: hour, End: hour.Add(time.Hour), LocalStart: st.localStart(hour),
		Carry: carryIn,
		Flags: append([]string(nil), gate.Flags...),
	}
	samples, err := loadHour(sb, hour)
	if err != nil {
		return rec, nil, nil, err
	}
	excludeSolar := slices.Contains(gate.Exclude, hourly.Solar)
	if len(gate.Exclude) > 0 {
		samples = slices.DeleteFunc(samples, func(s hourly.Sample) bool { return slices.Contains(gate.Exclude, s.Quantity) })
	}
	agg, err := hourly.AggregateHour(hour, samples, hourly.AggregateOptions{
		WindHeight: st.cfg.WindHeight, MinCoverage: st.cfg.MinCoverage,
	})
	if err != nil {
		p.log.Warn("hour not aggregated", "station", st.id, "hour", hour, "err", err)
		rec.Flags = append(rec.Flags, flagError+"aggregate")
		return rec, nil, nil, nil
	}
	rec.Inputs, rec.Stats, rec.Rain = agg.Hour, agg.Stats, agg.Rain
	rec.Inputs.Start = hour
	var tmin, tmax *float64
	if t, ok := agg.Stats[hourly.AirTemp]; ok && t.Count > 0 {
		tmin, tmax = &t.Min, &t.Max
	}
	missing := agg.Missing
	if excludeSolar {
		missing = slices.DeleteFunc(slices.Clone(missing), func(q hourly.Quantity) bool { return q == hourly.Solar })
	}
	for _, q := range missing {
		rec.Flags = append(rec.Flags, flagIncomplete+string(q))
	}
	if gate.StopET {
		rec.Flags = append(rec.Flags, FlagETStopped)
	}
	if len(missing) > 0 || gate.StopET {
		return rec, tmin, tmax, nil
	}
	if excludeSolar {
		rs, ok, err := p.hargreavesSolar(sb, st, hour, tmin, tmax)
		if err != nil {
			return rec, tmin, tmax, err
		}
		if !ok {
			rec.Flags = append(rec.Flags, flagIncomplete+string(hourly.Solar))
			return rec, tmin, tmax, nil
		}
		rec.Inputs.Solar, rec.Inputs.SolarEstimated = rs, true // hourly.Compute caps it at Rso
		rec.Fill = FillHargreaves
		rec.Flags = append(rec.Flags, FlagSolarFill)
	}
	res, carryOut, err := hourly.Compute(st.hs, st.cfg.Reference, rec.Inputs, carryIn)
	if err != nil {
		p.log.Warn("hour not computed", "station", st.id, "hour", hour, "err", err)
		rec.Flags = append(rec.Flags, flagError+"compute")
		return rec, tmin, tmax, nil
	}
	rec.Complete, rec.Result, rec.Carry = true, &res, carryOut
	rec.Flags = res.Flags(rec.Flags)
	return rec, tmin, tmax, nil
}

// hargreavesSolar estimates the hour's Rs by FAO-56 eq. 50 from its Ra and
// the air temperature range of the last 24 hours (this hour and the 23 before).
func (p *Pipeline) hargreavesSolar(sb stationBuckets, st *station, hour time.Time, tmin, tmax *float64) (float64, bool, error) {
	lo, hi := math.Inf(1), math.Inf(-1)
	if tmin != nil {
		lo, hi = *tmin, *tmax
	}
	c := sb.hours.Cursor()
	from := hour.Add(-23 * time.Hour)
	for k, v := c.Seek(hourKey(from)); k != nil && hourFromKey(k).Before(hour); k, v = c.Next() {
		var hs hourState
		if err := jsonUnmarshal(v, &hs); err != nil {
			return 0, false, err
		}
		if hs.TMin != nil && hs.TMax != nil {
			lo, hi = min(lo, *hs.TMin), max(hi, *hs.TMax)
		}
	}
	if math.IsInf(lo, 0) || hi < lo {
		return 0, false, nil
	}
	ra := hourly.SunForPeriod(st.hs, hour, time.Hour).Ra                // FAO-56 eq. 28
	return hourly.HargreavesSolar(ra, hi, lo, hargreavesKRs), true, nil // FAO-56 eq. 50
}

// loadHour reads every stored sample of the hour, in time order.
func loadHour(sb stationBuckets, hour time.Time) ([]hourly.Sample, error) {
	prefix := hourKey(hour)
	var out []hourly.Sample
	c := sb.samples.Cursor()
	for k, v := c.Seek(prefix); k != nil && string(k[:8]) == string(prefix); k, v = c.Next() {
		s, err := decodeSample(k, v)
		if err != nil {
			return nil, err
		}
		out = append(out, s)
	}
	return out, nil
}

// prune deletes samples of closed hours whose late window has passed, and
// closed-hour states older than both the late window and hourStatsKeep.
func (p *Pipeline) prune(st *station, now time.Time) error {
	return p.pruneAll([]*station{st}, now)
}

// pruneAll prunes the stations in one read transaction that looks and at
// most one write transaction that deletes, and sets when each has work next.
func (p *Pipeline) pruneAll(sts []*station, now time.Time) error {
	type first struct {
		sample, hour       time.Time
		hasSample, hasHour bool
	}
	type job struct {
		st                      *station
		sampleLimit, stateLimit time.Time
		first
	}
	var jobs []job
	for _, st := range sts {
		st.pruneSoon = false
		if !st.hasCursor {
			continue // its first closed hour asks again
		}
		j := job{st: st,
			sampleLimit: now.Add(-st.cfg.LateWindow.D() - time.Hour),
			stateLimit:  now.Add(-max(st.cfg.LateWindow.D(), hourStatsKeep) - time.Hour)}
		if st.cursor.Before(j.sampleLimit) {
			j.sampleLimit = st.cursor
		}
		if st.cursor.Before(j.stateLimit) {
			j.stateLimit = st.cursor
		}
		jobs = append(jobs, j)
	}
	if len(jobs) == 0 {
		return nil
	}
	firsts := func(sb stationBuckets) (f first) {
		if k, _ := sb.samples.Cursor().First(); k != nil {
			f.sample, f.hasSample = hourFromKey(k), true
		}
		if k, _ := sb.hours.Cursor().First(); k != nil {
			f.hour, f.hasHour = hourFromKey(k), true
		}
		return f
	}
	need := false
	if err := p.db.View(func(tx *bbolt.Tx) error {
		for i := range jobs {
			sb, err := jobs[i].st.buckets(tx)
			if err != nil {
				return err
			}
			j := &jobs[i]
			j.first = firsts(sb)
			need = need || (j.hasSample && j.sample.Before(j.sampleLimit)) || (j.hasHour && j.hour.Before(j.stateLimit))
		}
		return nil
	}); err != nil {
		return fmt.Errorf("prune: %w", err)
	}
	if need {
		if err := p.db.Update(func(tx *bbolt.Tx) error {
			for i := range jobs {
				j := &jobs[i]
				if !(j.hasSample && j.sample.Before(j.sampleLimit)) && !(j.hasHour && j.hour.Before(j.stateLimit)) {
					continue
				}
				sb, err := j.st.buckets(tx)
				if err != nil {
					return err
				}
				if err := deleteBefore(sb.samples, j.sampleLimit); err != nil {
					return err
				}
				if err := deleteBefore(sb.hours, j.stateLimit); err != nil {
					return err
				}
				j.first = firsts(sb)
			}
			return nil
		}); err != nil {
			for _, j := range jobs {
				j.st.pruneSoon = true // again at the next pass
			}
			return fmt.Errorf("prune: %w", err)
		}
	}
	for _, j := range jobs {
		j.st.pruneAt = j.st.nextPrune(now, j.sample, j.hasSample, j.hour, j.hasHour)
	}
	return nil
}

func deleteBefore(b *bbolt.Bucket, limit time.Time) error {
	c := b.Cursor()
	for k, _ := c.First(); k != nil && hourFromKey(k).Before(limit); k, _ = c.First() {
		if err := c.Delete(); err != nil {
			return fmt.Errorf("prune: %w", err)
		}
	}
	return nil
}

func putPending(tx *bbolt.Tx, st *station, rec hourly.Record) error {
	b, err := state.EncodeRecord(rec)
	if err != nil {
		return err
	}
	pb, err := tx.CreateBucketIfNotExists(bucketPending)
	if err != nil {
		return fmt.Errorf("pending bucket: %w", err)
	}
	return pb.Put(pendingKey(st, rec.Start, rec.Revision), b)
}
