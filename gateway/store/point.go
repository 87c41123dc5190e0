// Package store writes records to the time-series store through a durable
// outbox, and keeps the local history.
package store

import (
	"time"

	"go.etcd.io/bbolt"
)

// Class says what kind of record a point carries; the outbox cap policy and
// the local history use it.
type Class string

// The classes of points.
const (
	ClassHour    Class = "hour"    // hourly station record: never dropped
	ClassRaw     Class = "raw"     // raw-reading summary: dropped first when the outbox is full
	ClassZone    Class = "zone"    // zone balance step: never dropped
	ClassCommand Class = "command" // valve command: never dropped
	ClassReport  Class = "report"  // valve report / acknowledgement: never dropped
	ClassAlert   Class = "alert"   // alert raised/updated/cleared
)

// Point is one line-protocol point bound for the store.
type Point struct {
	Class       Class
	Measurement string
	Tags        map[string]string
	Fields      map[string]any // float64, int64, bool or string values
	Time        time.Time
	// Notes are text kept in the local history only and never sent to the
	// store (victoria-metrics would store text fields as 0): quality flags,
	// a gap-filling method's name, the local hour.
	Notes map[string]string
}

// Enqueuer commits points to the outbox inside the caller's transaction.
type Enqueuer interface {
	Enqueue(tx *bbolt.Tx, pts ...Point) error
}
