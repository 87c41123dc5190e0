package store

import (
	"log/slog"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/internal/testenv"
)

// An outbox at its cap drops the oldest raw summary on every enqueue; the
// log says so once when dropping starts and once when the outbox is below
// its cap again (with the number dropped), not once per enqueue. The
// metric still counts every drop.
func TestCapReachedLoggedOncePerEpisode(t *testing.T) {
	db := openTestDB(t)
	var logs testenv.Buffer
	reg := prometheus.NewRegistry()
	o := openTestOutbox(t, db, OutboxOptions{Cap: 3, Registerer: reg, Logger: slog.New(slog.NewTextHandler(&logs, nil))})
	enqueue(t, db, o, rawPt(0), rawPt(1), rawPt(2))
	for i := 3; i < 50; i++ {
		enqueue(t, db, o, rawPt(i))
	}
	assert.Equal(t, 47.0, testutil.ToFloat64(o.metrics.dropped.WithLabelValues("raw")))
	assert.Equal(t, 1, strings.Count(logs.String(), "cap reached"), logs.String())

	// The store takes everything: below the cap again at the next enqueue.
	items, err := o.next(1<<30, 0, time.Time{})
	require.NoError(t, err)
	require.NoError(t, o.done(items, nil, nil))
	enqueue(t, db, o, rawPt(50))
	assert.Equal(t, 1, strings.Count(logs.String(), "below its cap again"), logs.String())
	assert.Equal(t, 1, strings.Count(logs.String(), "dropped=47"), logs.String())

	// A second episode is logged again.
	for i := 51; i < 60; i++ {
		enqueue(t, db, o, rawPt(i))
	}
	assert.Equal(t, 2, strings.Count(logs.String(), "cap reached"), logs.String())
}
