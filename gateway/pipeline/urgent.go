package pipeline

import (
	"time"

	"etpulse/gateway/ingest"
)

// Urgent reports whether rd, received at now, must be stored before the
// pipeline's next pass to keep its timing: it closes its station's open
// hour (its time reaches the hour's end plus the close grace), falls in an
// hour already closed (a revision follows close_grace after it), is ahead
// of the clock by more than max_future (held until the clock reaches it),
// or its station has no open hour yet. The gateway keeps other readings in
// its journal until a checkpoint: they only add to an open hour, which
// nothing reads before that hour closes.
func (p *Pipeline) Urgent(rd ingest.Reading, now time.Time) bool {
	p.mu.Lock()
	defer p.mu.Unlock()
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
