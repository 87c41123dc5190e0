package store_test

import (
	"etpulse/gateway/pipeline"
	"etpulse/gateway/store"
)

// The outbox is the pipeline's hour handler.
var _ pipeline.HourHandler = (*store.Outbox)(nil)
