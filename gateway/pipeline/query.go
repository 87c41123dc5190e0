package pipeline

import (
	"encoding/json"
	"errors"
	"fmt"
	"sort"
	"time"

	"go.etcd.io/bbolt"

	"etpulse/gateway/ingest"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

func jsonUnmarshal(b []byte, v any) error {
	if err := json.Unmarshal(b, v); err != nil {
		return fmt.Errorf("decode state: %w", err)
	}
	return nil
}

// Pending returns the records emitted but not yet marked published, oldest
// hour first. After a crash between an hour's commit and its publication,
// the gateway publishes these on start.
func (p *Pipeline) Pending() ([]hourly.Record, error) {
	var out []hourly.Record
	err := p.db.View(func(tx *bbolt.Tx) error {
		b := tx.Bucket(bucketPending)
		if b == nil {
			return nil
		}
		return b.ForEach(func(k, v []byte) error {
			rec, err := state.DecodeRecord(v)
			if err != nil {
				return err
			}
			out = append(out, rec)
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("pending records: %w", err)
	}
	sort.SliceStable(out, func(i, j int) bool {
		if !out[i].Start.Equal(out[j].Start) {
			return out[i].Start.Before(out[j].Start)
		}
		return out[i].Revision < out[j].Revision
	})
	return out, nil
}

// MarkPublished forgets pending records once they are published.
func (p *Pipeline) MarkPublished(recs ...hourly.Record) error {
	err := p.db.Update(func(tx *bbolt.Tx) error {
		b := tx.Bucket(bucketPending)
		if b == nil {
			return nil
		}
		for _, rec := range recs {
			st := p.stations[stationID{rec.Site, rec.Station}]
			if st == nil {
				continue
			}
			if err := b.Delete(pendingKey(st, rec.Start, rec.Revision)); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return fmt.Errorf("mark published: %w", err)
	}
	return nil
}

// Seen is when one sensor was last heard.
type Seen struct {
	Sensor  string
	Arrival time.Time // pipeline clock when its latest reading was accepted
	Reading time.Time // latest reading timestamp accepted
	// Quantity and Value of that latest reading; Value is nil in rows
	// written before schema version 3 stored it.
	Quantity hourly.Quantity
	Value    *float64
}

// LastSeen returns, for every sensor of the station that has been heard, when
// it was last heard (persisted, so it survives restarts). Sensors never heard
// are absent.
func (p *Pipeline) LastSeen(site, stationID string) ([]Seen, error) {
	st := p.lookup(site, stationID)
	if st == nil {
		return nil, fmt.Errorf("last seen: station %s/%s is not configured", site, stationID)
	}
	var out []Seen
	err := p.db.View(func(tx *bbolt.Tx) error {
		sb, err := st.buckets(tx)
		if err != nil {
			return err
		}
		return sb.seen.ForEach(func(k, v []byte) error {
			var ss seenState
			if err := jsonUnmarshal(v, &ss); err != nil {
				return err
			}
			out = append(out, Seen{Sensor: string(k), Arrival: ss.Arrival, Reading: ss.Reading, Quantity: ss.Quantity, Value: ss.Value})
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("last seen: %w", err)
	}
	return out, nil
}

// Record returns the latest emitted record of a closed hour still held in
// state (hours are kept for at least the late window and 25 hours).
func (p *Pipeline) Record(site, stationID string, hourStart time.Time) (hourly.Record, bool, error) {
	st := p.lookup(site, stationID)
	if st == nil {
		return hourly.Record{}, false, fmt.Errorf("record: station %s/%s is not configured", site, stationID)
	}
	var rec hourly.Record
	found := false
	err := p.db.View(func(tx *bbolt.Tx) error {
		sb, err := st.buckets(tx)
		if err != nil {
			return err
		}
		var hs hourState
		ok, err := getJSON(sb.hours, hourKey(hourStart.UTC()), &hs)
		if err != nil || !ok || hs.Record == nil {
			return err
		}
		rec, found = hs.Record.Hourly(), true
		return nil
	})
	if err != nil {
		return hourly.Record{}, false, fmt.Errorf("record: %w", err)
	}
	return rec, found, nil
}

// NextDeadline returns the earliest wall-clock time at which a station's open
// hour closes by silence, a revision waiting for its late readings to stop
// is due, or a held reading comes within max_future of the clock; the zero
// time when there is none. The gateway sleeps until then when no readings
// arrive.
func (p *Pipeline) NextDeadline() time.Time {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.due.wake.peek()
}

// Flush closes every open hour up to and including the one holding each
// station's latest reading, as if its clock had moved on by an hour plus the
// grace, and re-emits revised hours. Replay calls it at the end of its input;
// nothing is closed by the wall clock.
func (p *Pipeline) Flush() ([]hourly.Record, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	var out []hourly.Record
	var errs []error
	for _, st := range p.order {
		if !st.hasCursor {
			continue
		}
		wm := st.hourStart(st.watermark).Add(time.Hour + st.cfg.CloseGrace.D())
		recs, err := p.closeDue(st, wm, time.Time{})
		out = append(out, recs...)
		if err == nil && st.dirty {
			recs, _, err = p.revise(st, time.Time{})
			out = append(out, recs...)
			st.dirty = err != nil
		}
		if err != nil {
			errs = append(errs, fmt.Errorf("station %s/%s: %w", st.site, st.id, err))
		}
		p.schedule(st)
	}
	return out, errors.Join(errs...)
}

// Revise re-emits the closed hours that received late readings, without
// closing anything by the wall clock or pruning. Replay calls it after each
// batch; the live gateway gets the same through Tick.
func (p *Pipeline) Revise() ([]hourly.Record, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	var out []hourly.Record
	var errs []error
	for _, st := range p.order {
		if !st.dirty {
			continue
		}
		recs, _, err := p.revise(st, time.Time{})
		out = append(out, recs...)
		if err != nil {
			errs = append(errs, fmt.Errorf("station %s/%s: %w", st.site, st.id, err))
			continue
		}
		st.dirty = false
		p.schedule(st)
	}
	return out, errors.Join(errs...)
}

// Stations lists the configured stations as site/station pairs.
func (p *Pipeline) Stations() [][2]string {
	out := make([][2]string, 0, len(p.order))
	for _, st := range p.order {
		out = append(out, [2]string{st.site, st.id})
	}
	return out
}

// stationLabel is the metrics label of a site or station id: the id, or
// "unknown".
func stationLabel(id string) string {
	if id == "" {
		return "unknown"
	}
	return id
}

// CountMessage counts one received MQTT message for the station of site
// (both "" when the topic matched no sensor).
func (p *Pipeline) CountMessage(site, station string) {
	p.m.received.WithLabelValues(labels(site, station)...).Inc()
}

// Reject counts and logs (rate-limited) a message or reading refused before
// it reached Ingest, e.g. by the payload decoder. The series is that of
// rej.Site and station.
func (p *Pipeline) Reject(now time.Time, station string, rej ingest.Rejection) {
	p.m.rejected.WithLabelValues(labels(rej.Site, station, string(rej.Reason))...).Inc()
	p.rejects.note(now, stationLabel(station), rej)
}

func (p *Pipeline) lookup(site, id string) *station { return p.stations[stationID{site, id}] }
