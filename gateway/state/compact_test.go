package state

import (
	"encoding/binary"
	"errors"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"
)

// churnedFile returns a state file of this Version (the committed version-1
// file, migrated) in which a burst of history points was written and then
// mostly deleted, as the history's retention does: the file keeps the pages
// the deleted points held.
func churnedFile(t *testing.T) string {
	t.Helper()
	path := copyTo(t, v1File)
	db, err := Open(path)
	require.NoError(t, err)
	val := make([]byte, 800) // about a stored et_hour point (issue 14: 845 B)
	for batch := range 20 {
		require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
			b := tx.Bucket(BucketHistory)
			for i := range 500 {
				k := binary.BigEndian.AppendUint64(nil, uint64(batch*500+i))
				if err := b.Put(append(k, "churn"...), val); err != nil {
					return err
				}
			}
			return nil
		}))
	}
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
		c := tx.Bucket(BucketHistory).Cursor()
		n := 0
		for k, _ := c.First(); k != nil; k, _ = c.Next() {
			if n++; n%10 != 0 && string(k[8:]) == "churn" {
				if err := c.Delete(); err != nil {
					return err
				}
			}
		}
		// A bucket's sequence must survive (the outbox numbers its points).
		_, err := tx.Bucket(BucketOutbox).NextSequence()
		return err
	}))
	require.NoError(t, db.Close())
	return path
}

func seqs(t *testing.T, path string) map[string]uint64 {
	t.Helper()
	db, err := OpenReadOnly(path)
	require.NoError(t, err)
	defer db.Close()
	c, err := takeCensus(db)
	require.NoError(t, err)
	return c.seqs
}

func TestCompactSameContentSmallerFile(t *testing.T) {
	path := churnedFile(t)
	before, beforeSeqs := dump(t, path), seqs(t, path)
	fi, err := os.Stat(path)
	require.NoError(t, err)

	res, err := Compact(path, nil)
	require.NoError(t, err)

	assert.Equal(t, before, dump(t, path), "every bucket, key and value as before")
	assert.Equal(t, beforeSeqs, seqs(t, path), "bucket sequences as before")
	assert.Equal(t, fi.Size(), res.Before.FileBytes)
	assert.Less(t, res.After.FileBytes, res.Before.FileBytes/2, "the churned pages are returned")
	assert.Greater(t, res.Before.FreeBytes, int64(0))
	assert.LessOrEqual(t, res.After.InUseBytes(), res.Before.InUseBytes())
	after, err := os.Stat(path)
	require.NoError(t, err)
	assert.Equal(t, res.After.FileBytes, after.Size())
	assert.Equal(t, len(before["history"]), res.Keys["history"])

	// The original is kept, unchanged, beside the file.
	assert.Equal(t, CompactBackupPath(path), res.Backup)
	assert.Equal(t, before, dump(t, res.Backup))
	bfi, err := os.Stat(res.Backup)
	require.NoError(t, err)
	assert.Equal(t, fi.Size(), bfi.Size())
	// No temporary file is left.
	names, err := filepath.Glob(filepath.Join(filepath.Dir(path), ".*"))
	require.NoError(t, err)
	assert.Empty(t, names)

	// The compacted file opens for the gateway, which then drops the backup
	// as it drops a migration's.
	db, err := Open(path)
	require.NoError(t, err)
	require.NoError(t, db.Close())
	_, err = os.Stat(res.Backup)
	assert.ErrorIs(t, err, os.ErrNotExist, "backup removed after a successful start")
}

func TestCompactRefusesLockedFile(t *testing.T) {
	path := churnedFile(t)
	before := dump(t, path)
	db, err := Open(path) // the running gateway
	require.NoError(t, err)
	_, err = Compact(path, nil)
	require.NoError(t, db.Close())
	require.ErrorIs(t, err, ErrLocked)
	assert.Contains(t, err.Error(), path)
	assert.Equal(t, before, dump(t, path))
	_, err = os.Stat(CompactBackupPath(path))
	assert.ErrorIs(t, err, os.ErrNotExist, "no backup of a refused compaction")
}

func TestCompactRefusesOtherVersions(t *testing.T) {
	path := copyTo(t, v1File)
	_, err := Compact(path, nil)
	require.ErrorIs(t, err, ErrOlderVersion)
	assert.Contains(t, err.Error(), "schema version 1")

	_, err = Compact(filepath.Join(t.TempDir(), "missing.db"), nil)
	require.Error(t, err)
	assert.True(t, errors.Is(err, os.ErrNotExist), "missing file: %v", err)
}

func TestCompactDetectsLostKeys(t *testing.T) {
	path := churnedFile(t)
	db, err := OpenReadOnly(path)
	require.NoError(t, err)
	want, err := takeCensus(db)
	require.NoError(t, err)
	require.NoError(t, db.Close())

	got := census{keys: map[string]int{}, seqs: map[string]uint64{}}
	for k, v := range want.keys {
		got.keys[k], got.seqs[k] = v, want.seqs[k]
	}
	got.keys["history"]--
	got.seqs["outbox"]++
	delete(got.keys, "zones|ledger")
	err = want.diff(got)
	require.Error(t, err)
	assert.Contains(t, err.Error(), `bucket "history": `)
	assert.Contains(t, err.Error(), `bucket "outbox": sequence`)
	assert.Contains(t, err.Error(), `bucket "zones|ledger": missing`)
	assert.NoError(t, want.diff(want))
}
