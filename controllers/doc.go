// Package controllers turns hourly reference ET into irrigation decisions: the
// root-zone water balance of each zone (FAO-56 chapter 8), crop coefficient
// curves (FAO-56 chapter 6), runtime arithmetic, watering windows, sequencing
// of zones on a shared water source, and the command ledger.
//
// The package is pure: it imports only the standard library and hourly, reads
// no clock and does no I/O. Every time is passed in, so a replay of last
// season runs through exactly the same code as the live gateway.
//
// Units: depths in mm, areas in m2, flows in L/min, rates in mm/h, durations
// of runs in whole minutes. One litre on one square metre is one millimetre.
package controllers

import "errors"

// ErrInput is wrapped by every error about a bad input value (a bad report,
// an impossible parameter), so callers can tell bad data from a bug.
var ErrInput = errors.New("bad input")
