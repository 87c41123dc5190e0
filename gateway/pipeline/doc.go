// Package pipeline turns accepted sensor readings into hourly ET records.
//
// Every reading is stored in a durable hour bin (one bbolt file) before its
// MQTT message is acknowledged. A station's hour [h, h+1) of standard time
// closes when the station's watermark (the latest reading time seen) passes
// h+1h+CloseGrace, or, for a silent station, when the wall clock passes
// h+1h+SilenceClose. Closing is one transaction: aggregate, compute with the
// persisted night cloudiness carry, build the hourly.Record, hand it to every
// HourHandler, mark the hour closed. After the commit the record is
// published. A reading for a closed hour within LateWindow re-opens the
// computation and the hour is emitted again with Revision+1.
//
// The core (Pipeline) is driven by Ingest and Tick with time passed in, so
// the live gateway, the replay command and the tests run the same code.
package pipeline
