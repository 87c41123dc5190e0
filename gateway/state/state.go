// Package state owns the gateway's durable state file: it opens it, holds
// its schema version, migrates older files (after a backup copy), refuses
// newer ones and files that are not state files, names every bucket (see
// SCHEMA.md beside this file for the layout of each), and defines the
// persistence structs of what it stores in its own format, with explicit
// conversions from and to the domain types.
//
// The file is one bbolt database. Components take a *bbolt.Tx where their
// change must commit atomically with another component's: an hour that
// closes, its outbox points and the zone balance step it drives are one
// transaction.
package state

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"time"

	"go.etcd.io/bbolt"
	bberrors "go.etcd.io/bbolt/errors"
)

// Version is the schema version this build writes, and the newest it reads.
// Every change to what the file stores bumps it and adds a migration.
const Version = 3

// Errors of Open that callers branch on.
var (
	// ErrNewerVersion: the file was written by a newer etpulse.
	ErrNewerVersion = errors.New("state file is newer than this etpulse")
	// ErrOlderVersion: a reader (OpenReadOnly) was given a file that must
	// be migrated first.
	ErrOlderVersion = errors.New("state file needs migrating")
	// ErrNotStateFile: the file is not a bbolt database, or not etpulse's.
	ErrNotStateFile = errors.New("not an etpulse state file")
	// ErrLocked: another process (usually a running gateway) holds the file.
	ErrLocked = errors.New("state file is held by another process")
)

// lockWait is how long Open waits for another process to release the file.
const lockWait = 5 * time.Second

// Open opens (creating if needed) the state file at path, at schema
// Version. A new file gets the version at creation. A file of an older
// version is first copied to BackupPath(path, old) and then migrated, all
// migrations in one transaction; the backup is kept until the next start
// that needs no migration, which removes it (and Compact's backup). A newer file is refused with
// ErrNewerVersion naming both versions; a file that is not a state file
// with ErrNotStateFile. Open fails after a few seconds (ErrLocked) rather
// than waiting forever when another process holds the file.
func Open(path string) (*bbolt.DB, error) { return OpenLogged(path, nil) }

// OpenLogged is Open with a logger for the migration and backup messages;
// nil discards them.
func OpenLogged(path string, log *slog.Logger) (*bbolt.DB, error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	db, err := openBolt(path)
	if err != nil {
		return nil, err
	}
	v, err := version(db)
	if err != nil {
		_ = db.Close()
		return nil, fmt.Errorf("open state %s: %w", path, err)
	}
	switch {
	case v > Version:
		_ = db.Close()
		return nil, fmt.Errorf("open state %s: schema version %d, this etpulse reads up to %d: run a newer etpulse, or restore a backup of the file: %w",
			path, v, Version, ErrNewerVersion)
	case v == Version:
		removeBackups(path, log)
		return db, nil
	}
	// Older: back up (closed, so the copy is consistent), then migrate.
	if err := db.Close(); err != nil {
		return nil, fmt.Errorf("open state %s: %w", path, err)
	}
	backup := BackupPath(path, v)
	if err := copyFile(path, backup); err != nil {
		return nil, fmt.Errorf("open state %s: back up before migrating: %w", path, err)
	}
	if db, err = openBolt(path); err != nil {
		return nil, err
	}
	if err := db.Update(func(tx *bbolt.Tx) error { return migrate(tx, v) }); err != nil {
		_ = db.Close()
		return nil, fmt.Errorf("open state %s: migrate from version %d to %d (the file is unchanged; backup %s): %w", path, v, Version, backup, err)
	}
	log.Info("state file migrated", "path", path, "from", v, "to", Version, "backup", backup)
	return db, nil
}

// OpenReadOnly opens the state file at path for reading only, for tools
// that read history beside a stopped gateway: it never creates, migrates or
// writes the file. Files of this Version are opened; an older file (whose
// stored points have the names before version 3) is refused with
// ErrOlderVersion and how to migrate it, a newer one with ErrNewerVersion,
// a missing one with an error naming it.
func OpenReadOnly(path string) (*bbolt.DB, error) {
	if _, err := os.Stat(path); err != nil {
		return nil, fmt.Errorf("open state %s: %w", path, err)
	}
	db, err := openBoltWith(path, &bbolt.Options{ReadOnly: true, Timeout: 2 * time.Second})
	if err != nil {
		return nil, err
	}
	v, err := FileVersion(db)
	if err == nil && v > Version {
		err = fmt.Errorf("schema version %d, this etpulse reads up to %d: use a newer etpulse: %w", v, Version, ErrNewerVersion)
	}
	if err == nil && v < Version {
		err = fmt.Errorf("schema version %d, this etpulse reads version %d: start the gateway once with this etpulse (etpulse run), which migrates the file and keeps a backup, or read a copy with the etpulse that wrote it: %w", v, Version, ErrOlderVersion)
	}
	if err != nil {
		_ = db.Close()
		return nil, fmt.Errorf("open state %s: %w", path, err)
	}
	return db, nil
}

func openBolt(path string) (*bbolt.DB, error) {
	return openBoltWith(path, &bbolt.Options{Timeout: lockWait})
}

func openBoltWith(path string, opt *bbolt.Options) (*bbolt.DB, error) {
	db, err := bbolt.Open(path, 0o600, opt)
	switch {
	case err == nil:
		return db, nil
	case errors.Is(err, bberrors.ErrTimeout):
		return nil, fmt.Errorf("open state %s: %w (is a gateway running with it?)", path, ErrLocked)
	case errors.Is(err, bberrors.ErrInvalid), errors.Is(err, bberrors.ErrVersionMismatch), errors.Is(err, bberrors.ErrChecksum):
		return nil, fmt.Errorf("open state %s: %w (%v): check state.path", path, ErrNotStateFile, err)
	}
	return nil, fmt.Errorf("open state %s: %w", path, err)
}

// version reads the file's schema version, writing Version into a new file.
// A file with buckets but no version is version 1 (written before the file
// carried one), provided its buckets are etpulse's.
func version(db *bbolt.DB) (int, error) {
	v := 0
	err := db.Update(func(tx *bbolt.Tx) error {
		if m := tx.Bucket(BucketMeta); m != nil {
			raw := m.Get(keyVersion)
			if len(raw) != 8 {
				return fmt.Errorf("schema version: %d bytes, want 8: %w", len(raw), ErrNotStateFile)
			}
			v = int(binary.BigEndian.Uint64(raw))
			return nil
		}
		empty, foreign := true, ""
		if err := tx.ForEach(func(name []byte, _ *bbolt.Bucket) error {
			empty = false
			if !knownV1[string(name)] && foreign == "" {
				foreign = string(name)
			}
			return nil
		}); err != nil {
			return err
		}
		switch {
		case empty:
			v = Version
			return setVersion(tx, Version)
		case foreign != "":
			return fmt.Errorf("bucket %q is not one of etpulse's: %w", foreign, ErrNotStateFile)
		}
		v = 1
		return nil
	})
	return v, err
}

func setVersion(tx *bbolt.Tx, v int) error {
	m, err := tx.CreateBucketIfNotExists(BucketMeta)
	if err != nil {
		return err
	}
	return m.Put(keyVersion, binary.BigEndian.AppendUint64(nil, uint64(v)))
}

// FileVersion returns the schema version of the open file db.
func FileVersion(db *bbolt.DB) (int, error) {
	v := 0
	err := db.View(func(tx *bbolt.Tx) error {
		m := tx.Bucket(BucketMeta)
		if m == nil {
			v = 1
			return nil
		}
		raw := m.Get(keyVersion)
		if len(raw) != 8 {
			return fmt.Errorf("schema version: %d bytes, want 8: %w", len(raw), ErrNotStateFile)
		}
		v = int(binary.BigEndian.Uint64(raw))
		return nil
	})
	return v, err
}

// BackupPath is where Open copies a file of version v before migrating it.
func BackupPath(path string, v int) string { return fmt.Sprintf("%s.v%d.bak", path, v) }

func removeBackups(path string, log *slog.Logger) {
	backups := []string{CompactBackupPath(path)}
	for v := 1; v < Version; v++ {
		backups = append(backups, BackupPath(path, v))
	}
	for _, b := range backups {
		if err := os.Remove(b); err == nil {
			log.Info("state file backup removed after a successful start", "backup", b)
		}
	}
}

// copyFile copies src to dst atomically: temp file, fsync, rename.
func copyFile(src, dst string) error {
	in, err := os.Open(src)
	if err != nil {
		return err
	}
	defer in.Close()
	tmp, err := os.CreateTemp(filepath.Dir(dst), "."+filepath.Base(dst)+".tmp-")
	if err != nil {
		return err
	}
	defer os.Remove(tmp.Name())
	if _, err := io.Copy(tmp, in); err != nil {
		_ = tmp.Close()
		return err
	}
	if err := tmp.Sync(); err != nil {
		_ = tmp.Close()
		return err
	}
	if err := tmp.Close(); err != nil {
		return err
	}
	return os.Rename(tmp.Name(), dst)
}
