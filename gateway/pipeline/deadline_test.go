package pipeline

import (
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// A pass of the clock with nothing due touches no station: no transaction
// is opened (the old pass opened one read transaction per station on every
// call, to look for samples to prune), and the stations whose deadlines
// come later are not visited.
func TestTickWithNothingDueOpensNoTransaction(t *testing.T) {
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, _ := newTestPipeline(t, db, Options{})
	_, err := p.Ingest(h10.Add(40*time.Minute), benchReadings(h10, h10.Add(40*time.Minute), 5*time.Minute))
	require.NoError(t, err)
	// The first pass after start looks at every station once (revisions a
	// crash left, samples to prune).
	_, err = p.Tick(h10.Add(41 * time.Minute))
	require.NoError(t, err)

	before := db.Stats().TxN
	for i := 0; i < 10; i++ {
		out, err := p.Tick(h10.Add(42*time.Minute + time.Duration(i)*time.Second))
		require.NoError(t, err)
		assert.Empty(t, out)
	}
	assert.Equal(t, before, db.Stats().TxN, "read transactions opened by passes with nothing due")

	// The silence deadline still closes the hour (TestSilenceClosesQuietStation).
	assert.Equal(t, h10.Add(75*time.Minute), p.NextDeadline())
	out, err := p.Tick(h10.Add(75 * time.Minute))
	require.NoError(t, err)
	require.Len(t, out, 1)
}
