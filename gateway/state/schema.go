package state

// The buckets of the state file: every top-level bucket, and the nested
// buckets of the zones. SCHEMA.md describes the keys and values of each; the
// package named beside a bucket is the only one that reads or writes it.
var (
	// BucketMeta holds the schema version (key "schema_version", 8 bytes
	// big-endian). Owner: state.
	BucketMeta = []byte("state.meta")

	// BucketPipeline and BucketPending hold hour bins, closed hours,
	// carries, cursors, rain counters and records not yet handed on.
	// Owner: pipeline.
	BucketPipeline = []byte("pipeline")
	BucketPending  = []byte("pipeline.pending")

	// Alert state, closed-hour observations and retained alert messages to
	// publish. Owner: quality.
	BucketAlerts       = []byte("alerts/state")
	BucketAlertHours   = []byte("alerts/hours")
	BucketAlertPublish = []byte("alerts/publish")

	// The store outbox and the local history. Owner: store.
	BucketOutbox           = []byte("outbox")
	BucketOutboxRaw        = []byte("outbox/raw")
	BucketOutboxSeries     = []byte("outbox/series")
	BucketOutboxMeta       = []byte("outbox/meta")
	BucketOutboxQuarantine = []byte("outbox/quarantine")
	BucketHistory          = []byte("history")

	// BucketZones holds, nested: BucketZoneState (site/zone -> ZoneBalance),
	// BucketLedger (site/command id -> LedgerEntry), BucketHolds (site/ or
	// site/zone -> hold), BucketWater (site/zone/request id -> applied
	// time). Owner: zones.
	BucketZones     = []byte("zones")
	BucketZoneState = []byte("state")
	BucketLedger    = []byte("ledger")
	BucketHolds     = []byte("holds")
	BucketWater     = []byte("water")

	// BucketReady is written by the readiness check. Owner: httpapi.
	BucketReady = []byte("httpapi/ready")
)

var keyVersion = []byte("schema_version")

// knownV1 are the top-level buckets a version-1 file (no version key) may
// hold; a file with any other is not taken for a state file.
var knownV1 = map[string]bool{
	"pipeline": true, "pipeline.pending": true,
	"alerts/state": true, "alerts/hours": true, "alerts/publish": true,
	"outbox": true, "outbox/raw": true, "outbox/series": true, "outbox/meta": true, "outbox/quarantine": true,
	"history": true, "zones": true, "httpapi/ready": true,
}
