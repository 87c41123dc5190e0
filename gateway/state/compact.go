package state

import (
	"errors"
	"fmt"
	"log/slog"
	"maps"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"time"

	"go.etcd.io/bbolt"
)

// compactTxMax bounds the bytes copied per transaction while compacting, so
// a large file does not need all of its pages in one transaction's memory.
const compactTxMax = 32 << 20

// compactLockWait is how long Compact waits for the file: a running gateway
// holds it, and Compact refuses rather than waits.
const compactLockWait = time.Second

// Usage is the space of a state file: the file's size, the bytes its pages
// reach (the high-water mark), and of those the bytes on free pages, which
// bbolt reuses but never returns to the file system.
type Usage struct {
	FileBytes int64 // size of the file on disk
	DataBytes int64 // pages up to the highest one in use (tx.Size)
	FreeBytes int64 // free and pending pages below that mark
}

// InUseBytes is the bytes of pages that hold data.
func (u Usage) InUseBytes() int64 { return u.DataBytes - u.FreeBytes }

// SpaceUsage measures db, which must be open for writing (a read-only open
// does not count free pages). It writes nothing: the write transaction it
// takes to read the free list is rolled back.
func SpaceUsage(db *bbolt.DB) (Usage, error) {
	tx, err := db.Begin(true)
	if err != nil {
		return Usage{}, fmt.Errorf("space usage %s: %w", db.Path(), err)
	}
	u := Usage{DataBytes: tx.Size()}
	// Rolling back a write transaction refreshes db.Stats' free pages.
	if err := tx.Rollback(); err != nil {
		return Usage{}, fmt.Errorf("space usage %s: %w", db.Path(), err)
	}
	u.FreeBytes = int64(db.Stats().FreeAlloc)
	fi, err := os.Stat(db.Path())
	if err != nil {
		return Usage{}, fmt.Errorf("space usage: %w", err)
	}
	u.FileBytes = fi.Size()
	return u, nil
}

// CompactBackupPath is where Compact keeps the file as it was before.
// Like the migration backups (BackupPath), it is removed by the next Open
// that succeeds, once the compacted file has been used.
func CompactBackupPath(path string) string { return path + ".precompact.bak" }

// CompactResult says what Compact did.
type CompactResult struct {
	Before, After Usage
	Backup        string         // CompactBackupPath of the file
	Keys          map[string]int // keys (rows and nested buckets) per bucket path ("|" between names), equal before and after
}

// Compact rewrites the state file at path into a new file holding the same
// buckets, keys and values on as few pages as they need, and puts it in
// place of the old one, whose space bbolt never returns. The gateway must be
// stopped: a held file is refused with ErrLocked. The file must be of this
// Version (older files are migrated by starting the gateway once). The copy
// is verified (it opens as a state file of the same version, with the same
// number of keys in every bucket) before the original is kept at
// CompactBackupPath and the copy renamed over path. On any error path is
// left as it was. log may be nil.
func Compact(path string, log *slog.Logger) (CompactResult, error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	var res CompactResult
	if _, err := os.Stat(path); err != nil {
		return res, fmt.Errorf("compact %s: %w", path, err)
	}
	// Opened for writing, so the lock is exclusive: a gateway that starts
	// meanwhile waits, then gives up, instead of writing to a file about to
	// be replaced. Nothing is written to it.
	src, err := openBoltWith(path, &bbolt.Options{Timeout: compactLockWait})
	if err != nil {
		return res, fmt.Errorf("compact: %w", err)
	}
	defer src.Close()
	v, err := FileVersion(src)
	if err != nil {
		return res, fmt.Errorf("compact %s: %w", path, err)
	}
	if v != Version {
		return res, fmt.Errorf("compact %s: schema version %d, this etpulse compacts version %d: %w", path, v, Version, versionErr(v))
	}
	if res.Before, err = SpaceUsage(src); err != nil {
		return res, fmt.Errorf("compact: %w", err)
	}
	before, err := takeCensus(src)
	if err != nil {
		return res, fmt.Errorf("compact %s: count keys: %w", path, err)
	}
	res.Keys = before.keys
	tmp, err := compactTo(src, path)
	if err != nil {
		return res, fmt.Errorf("compact %s: %w", path, err)
	}
	defer os.Remove(tmp) // after the rename it no longer exists
	if res.After, err = verifyCompacted(tmp, before); err != nil {
		return res, fmt.Errorf("compact %s: verify the copy: %w", path, err)
	}
	res.Backup = CompactBackupPath(path)
	if err := keepBackup(path, res.Backup); err != nil {
		return res, fmt.Errorf("compact %s: keep the original: %w", path, err)
	}
	if err := os.Rename(tmp, path); err != nil {
		return res, fmt.Errorf("compact %s: put the copy in place: %w", path, err)
	}
	if err := syncDir(filepath.Dir(path)); err != nil {
		return res, fmt.Errorf("compact %s: %w", path, err)
	}
	log.Info("state file compacted", "path", path,
		"bytes_before", res.Before.FileBytes, "bytes_after", res.After.FileBytes, "backup", res.Backup)
	return res, nil
}

func versionErr(v int) error {
	if v > Version {
		return ErrNewerVersion
	}
	return ErrOlderVersion
}

// compactTo copies src into a new temporary file beside path and returns
// its name.
func compactTo(src *bbolt.DB, path string) (string, error) {
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".compact-")
	if err != nil {
		return "", err
	}
	tmp := f.Name()
	if err := f.Close(); err != nil {
		_ = os.Remove(tmp)
		return "", err
	}
	dst, err := bbolt.Open(tmp, 0o600, &bbolt.Options{Timeout: compactLockWait})
	if err != nil {
		_ = os.Remove(tmp)
		return "", err
	}
	err = bbolt.Compact(dst, src, compactTxMax)
	if cerr := dst.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		_ = os.Remove(tmp)
		return "", fmt.Errorf("copy: %w", err)
	}
	return tmp, nil
}

// verifyCompacted opens the copy as a state file of this Version, compares
// its keys and sequences with want and measures it.
func verifyCompacted(tmp string, want census) (Usage, error) {
	db, err := OpenReadOnly(tmp)
	if err != nil {
		return Usage{}, err
	}
	got, err := takeCensus(db)
	if cerr := db.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return Usage{}, err
	}
	if err := want.diff(got); err != nil {
		return Usage{}, err
	}
	db, err = openBolt(tmp)
	if err != nil {
		return Usage{}, err
	}
	u, err := SpaceUsage(db)
	if cerr := db.Close(); err == nil {
		err = cerr
	}
	return u, err
}

// census is the number of keys and the sequence of every bucket, nested
// ones by their path (names joined by "|"), a nested bucket counting as a
// key of its parent.
type census struct {
	keys map[string]int
	seqs map[string]uint64
}

func takeCensus(db *bbolt.DB) (census, error) {
	c := census{keys: map[string]int{}, seqs: map[string]uint64{}}
	err := db.View(func(tx *bbolt.Tx) error {
		return tx.ForEach(func(name []byte, b *bbolt.Bucket) error {
			return c.add(string(name), b)
		})
	})
	return c, err
}

func (c census) add(name string, b *bbolt.Bucket) error {
	c.keys[name] += 0 // an empty bucket is listed too
	c.seqs[name] = b.Sequence()
	return b.ForEach(func(k, v []byte) error {
		c.keys[name]++
		if v == nil {
			return c.add(name+"|"+string(k), b.Bucket(k))
		}
		return nil
	})
}

// diff names the buckets whose keys or sequence differ in got.
func (c census) diff(got census) error {
	var diffs []string
	for _, b := range slices.Sorted(maps.Keys(c.keys)) {
		if _, ok := got.keys[b]; !ok {
			diffs = append(diffs, fmt.Sprintf("bucket %q: missing", b))
			continue
		}
		if got.keys[b] != c.keys[b] {
			diffs = append(diffs, fmt.Sprintf("bucket %q: %d keys, want %d", b, got.keys[b], c.keys[b]))
		}
		if got.seqs[b] != c.seqs[b] {
			diffs = append(diffs, fmt.Sprintf("bucket %q: sequence %d, want %d", b, got.seqs[b], c.seqs[b]))
		}
	}
	for _, b := range slices.Sorted(maps.Keys(got.keys)) {
		if _, ok := c.keys[b]; !ok {
			diffs = append(diffs, fmt.Sprintf("bucket %q: not in the original", b))
		}
	}
	if len(diffs) > 0 {
		return errors.New(strings.Join(diffs, "; "))
	}
	return nil
}

// keepBackup makes backup a second name of the file at path (a copy where
// the file system has no hard links), replacing an older backup.
func keepBackup(path, backup string) error {
	if err := os.Remove(backup); err != nil && !errors.Is(err, os.ErrNotExist) {
		return err
	}
	if err := os.Link(path, backup); err == nil {
		return nil
	}
	return copyFile(path, backup)
}

// syncDir makes the renames in dir durable.
func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = d.Sync()
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("sync directory %s: %w", dir, err)
	}
	return nil
}
