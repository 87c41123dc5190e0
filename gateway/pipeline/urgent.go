package pipeline

import (
	"time"

	"etpulse/gateway/ingest"
)

// Urgent reports whether any of readings, received at now, must be stored
// before the pipeline's next pass to keep its timing: it closes its
// station's open hour (its time reaches the hour's end plus the close
// grace), falls in an hour already closed (a revision follows close_grace
// after it), is ahead of the clock by more than max_future (held until the
// clock reaches it), or its station has no open hour yet. The gateway keeps
// other readings in its journal until a checkpoint: they only add to an
// open hour, which nothing reads before that hour closes. One call per
// batch: the pipeline's lock is taken once.
func (p *Pipeline) Urgent(readings []ingest.Reading, now time.Time) bool {
	p.mu.Lock()
	defer p.mu.Unlock()
	for _, rd := range readings {
		if p.urgent(rd, now) {
			return true
		}
	}
	return false
}

// urgent is Urgent for one reading, with p.mu held.
func (p *Pipeline) urgent(rd ingest.Reading, now time.Time) bool {
	st := p.stations[stationID{rd.Site, rd.Station}]
	if st == nil || !st.hasCursor {
		return true
	}
	t := rd.Sample.Time
	switch {
	case t.After(now.Add(st.cfg.MaxFuture.D())):
		return true
	case st.hourStart(t).Before(st.cursor):
		return true
	case !t.Before(st.cursor.Add(time.Hour + st.cfg.CloseGrace.D())):
		return true
	}
	return false
}
