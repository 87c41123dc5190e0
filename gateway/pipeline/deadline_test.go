package pipeline

import (
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"
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

// Hours that fall due together for many stations close in one write
// transaction (one fsync) per hour of the clock, not one per station; the
// prunes that follow take one more. Measured with bbolt's count of write transactions.
func TestHoursOfManyStationsCloseInOneTransaction(t *testing.T) {
	cfg := manyStationsConfig(t, 50)
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, err := New(cfg, Options{DB: db})
	require.NoError(t, err)
	_, err = p.Ingest(h10.Add(time.Hour), networkReadings(cfg, h10, h10.Add(time.Hour), 10*time.Minute))
	require.NoError(t, err)
	_, err = p.Tick(h10.Add(time.Hour)) // the first pass after start
	require.NoError(t, err)

	before := commits(t, db)
	recs, err := p.Tick(h10.Add(time.Hour + 20*time.Minute)) // silence closes every station's hour
	require.NoError(t, err)
	require.Len(t, recs, 50)
	assert.LessOrEqual(t, commits(t, db)-before, 2, "write transactions for 50 closed hours")
	for i, r := range recs {
		assert.Equal(t, cfg.Sites[0].Stations[i].ID, r.Station, "records in configuration order")
		assert.Equal(t, h10, r.Start)
	}

	// Seven hours later every station's samples of that hour leave the
	// late window (6h): pruned together.
	before = commits(t, db)
	recs, err = p.Tick(h10.Add(8*time.Hour + 1*time.Minute))
	require.NoError(t, err)
	require.Len(t, recs, 50*6, "six empty hours each")
	// One round per hour of the clock (each hour's quality gate is asked
	// after the station's previous hour closed), one for the prunes.
	assert.LessOrEqual(t, commits(t, db)-before, 7, "write transactions for 300 closed hours and 50 prunes")
	require.NoError(t, db.View(func(tx *bbolt.Tx) error {
		for _, st := range p.order {
			sb, err := st.buckets(tx)
			require.NoError(t, err)
			k, _ := sb.samples.Cursor().First()
			assert.Nil(t, k, "samples of %s pruned", st.id)
		}
		return nil
	}))
}

// commits returns the id of the latest committed write transaction (a read
// transaction's id): the difference of two calls counts the commits between.
func commits(t *testing.T, db *bbolt.DB) (id int) {
	t.Helper()
	require.NoError(t, db.View(func(tx *bbolt.Tx) error { id = tx.ID(); return nil }))
	return id
}

// A batch that carries the next hour's first readings of many stations
// closes their hours together: one commit for the readings before, one
// for the closes, one for the readings after; not two per station.
func TestBatchClosingManyStationsHours(t *testing.T) {
	cfg := manyStationsConfig(t, 50)
	db := openDB(t, filepath.Join(t.TempDir(), "s.db"))
	p, err := New(cfg, Options{DB: db})
	require.NoError(t, err)
	_, err = p.Ingest(h10.Add(50*time.Minute), networkReadings(cfg, h10, h10.Add(time.Hour), 10*time.Minute))
	require.NoError(t, err)

	before := commits(t, db)
	next := networkReadings(cfg, h10.Add(time.Hour+5*time.Minute), h10.Add(time.Hour+15*time.Minute), 10*time.Minute)
	res, err := p.Ingest(h10.Add(time.Hour+5*time.Minute), next)
	require.NoError(t, err)
	require.Len(t, res.Records, 50)
	assert.Equal(t, len(next), res.Accepted)
	assert.LessOrEqual(t, commits(t, db)-before, 3, "write transactions for 50 stations' hours closed by one batch")
	for i, r := range res.Records {
		assert.Equal(t, cfg.Sites[0].Stations[i].ID, r.Station, "records in configuration order")
		assert.Equal(t, 6, r.Stats["air_temp"].Count, r.Station)
	}
	// The readings after the close are in the new hour, not the closed one.
	rec, ok, err := p.Record("net", "s00049", h10)
	require.NoError(t, err)
	require.True(t, ok)
	assert.Equal(t, 6, rec.Stats["air_temp"].Count)
}
