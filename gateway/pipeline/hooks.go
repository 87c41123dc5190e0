package pipeline

import (
	"time"

	"go.etcd.io/bbolt"

	"etpulse/hourly"
)

// HourHandler receives every closed (or revised) hour inside the bbolt
// transaction that closes it, so the handler's own state change commits
// atomically with the hour. Returning an error aborts the transaction: the
// hour stays open and is closed again on the next tick.
//
// Revisions: a handler sees rec.Revision 0 first, then rec.Revision n > 0
// each time a late reading changes the hour. A revision REPLACES the earlier
// record of the same (station, Start): a water balance applies the difference
// between the new and the previous ET, a store overwrites by timestamp. The
// pipeline never emits two records with the same revision for one hour.
type HourHandler interface {
	HandleHour(tx *bbolt.Tx, rec hourly.Record) error
}

// SampleObserver sees every accepted sample (drift and fault monitors). It is
// called inside the write transaction that stores the sample, after the
// sample is written, and must neither use the state file nor block for long;
// now is when the sample's message arrived. Should that transaction fail,
// the sample is offered again when it is stored again.
type SampleObserver interface {
	ObserveSample(site, station string, s hourly.Sample, now time.Time)
}

// SampleCommitter is a SampleObserver that keeps what its observations
// changed in the state file: CommitObserved writes it in the transaction
// that stores the samples, after they were observed, so that a kill cannot
// keep the samples and lose what they changed (an alert a spike raised);
// AbortObserved is called when that transaction does not commit.
type SampleCommitter interface {
	SampleObserver
	CommitObserved(tx *bbolt.Tx) error
	AbortObserved()
}

// QualityGate is asked, when an hour is computed, which flags to add and
// which quantities to exclude from it.
type QualityGate interface {
	Gate(site, station string, hourStart time.Time) Gate
}

// Gate is a QualityGate's verdict on one station-hour.
//
// Flags are appended to the record's flags. A quantity in Exclude is dropped
// from the hour's samples before aggregation; an excluded hourly.Solar is
// replaced by the Hargreaves-Samani estimate (FAO-56 eq. 50, kRs 0.16) from
// the hour's Ra and the last 24 h air temperature range, and the record says
// so in Fill ("hargreaves-samani-rs") and a flag. StopET emits the hour with
// no ET (Result nil, Complete false, flag "et:stopped").
type Gate struct {
	Flags   []string
	Exclude []hourly.Quantity
	StopET  bool
}

// SampleObserverFunc adapts a function to SampleObserver.
type SampleObserverFunc func(site, station string, s hourly.Sample, now time.Time)

// ObserveSample calls f.
func (f SampleObserverFunc) ObserveSample(site, station string, s hourly.Sample, now time.Time) {
	f(site, station, s, now)
}

var _ SampleObserver = SampleObserverFunc(nil)
