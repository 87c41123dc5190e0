package state

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"maps"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/controllers"
)

// v1File is a state file written by the release before the file carried a
// version (made by testdata/state/gen/gen.sh): two days of the demo farm and
// a few points pending in the outbox.
const v1File = "../../testdata/state/v1-tallowwood.db"

func copyTo(t *testing.T, src string) string {
	t.Helper()
	dst := filepath.Join(t.TempDir(), "etpulse.db")
	in, err := os.Open(src)
	require.NoError(t, err)
	defer in.Close()
	out, err := os.Create(dst)
	require.NoError(t, err)
	_, err = io.Copy(out, in)
	require.NoError(t, err)
	require.NoError(t, out.Close())
	return dst
}

// dump returns every key and value of the file, by bucket path.
func dump(t *testing.T, path string) map[string]map[string][]byte {
	t.Helper()
	db, err := bbolt.Open(path, 0o600, &bbolt.Options{ReadOnly: true})
	require.NoError(t, err)
	defer db.Close()
	out := map[string]map[string][]byte{}
	var walk func(name string, b *bbolt.Bucket)
	walk = func(name string, b *bbolt.Bucket) {
		m := map[string][]byte{}
		out[name] = m
		require.NoError(t, b.ForEach(func(k, v []byte) error {
			if v == nil {
				walk(name+"/"+string(k), b.Bucket(k))
				return nil
			}
			m[string(k)] = append([]byte(nil), v...)
			return nil
		}))
	}
	require.NoError(t, db.View(func(tx *bbolt.Tx) error {
		return tx.ForEach(func(name []byte, b *bbolt.Bucket) error { walk(string(name), b); return nil })
	}))
	return out
}

// TestMigrateV1: the committed version-1 file opens at Version. Every
// bucket but the zone balances, the ledger and the history (renamed points,
// TestMigrateStoredPoints) is byte for byte what it was (records, carries,
// hour bins, outbox entries, alerts, holds);
// every ledger row and zone balance reads back field by field as the domain
// types the version-1 release wrote; a backup of the original is kept next
// to the file until the next start.
func TestMigrateV1(t *testing.T) {
	path := copyTo(t, v1File)
	before := dump(t, path)
	require.Empty(t, before[string(BucketMeta)], "a version-1 file has no version")
	require.NotEmpty(t, before["zones/ledger"])
	require.NotEmpty(t, before["zones/state"])
	require.NotEmpty(t, before["outbox"])
	require.NotEmpty(t, before["alerts/state"])
	require.NotEmpty(t, before["history"])

	after := openDump(t, path)

	// The history's points get the version-3 names
	// (TestMigrateStoredPoints checks every one).
	migrated := map[string]bool{"zones/ledger": true, "zones/state": true, string(BucketMeta): true, string(BucketHistory): true}
	for name, kv := range before {
		if migrated[name] {
			continue
		}
		if isStationMeta(name) {
			// Version 3 adds the closed-through mark; the rest is untouched.
			kv = maps.Clone(kv)
			kv["closed_through"] = kv["cursor"]
		}
		assert.Equal(t, kv, after[name], "bucket %s changed", name)
	}
	for name := range after {
		_, was := before[name]
		assert.True(t, was || name == string(BucketMeta) || isStationHeld(name), "new bucket %s", name)
	}

	// Ledger rows: the version-1 bytes are the JSON of controllers.Command
	// (whose tags have not changed since); the version-2 entry must give
	// back the same command.
	require.Len(t, after["zones/ledger"], len(before["zones/ledger"]))
	for k, raw := range before["zones/ledger"] {
		var want controllers.Command
		require.NoError(t, json.Unmarshal(raw, &want))
		got, err := DecodeCommand(after["zones/ledger"][k])
		require.NoError(t, err)
		assert.Equal(t, want, got, k)
		assert.False(t, bytes.Equal(raw, after["zones/ledger"][k]), "%s was rewritten in the new format", k)
	}
	for k, raw := range before["zones/state"] {
		var want struct {
			State      controllers.State `json:"state"`
			StaleAlert bool              `json:"stale_alert"`
			Skip       string            `json:"skip"`
		}
		require.NoError(t, json.Unmarshal(raw, &want))
		var got ZoneBalance
		require.NoError(t, json.Unmarshal(after["zones/state"][k], &got))
		assert.Equal(t, want.State, got.State(), k)
		assert.Equal(t, want.StaleAlert, got.StaleAlert, k)
		assert.Equal(t, want.Skip, got.LastSkip, k)
		assert.NotEmpty(t, want.State.Hours, k)
	}

	// Closed hours: version 1 kept the record as the JSON of that release's
	// MQTT record, which is the shape of Record: every stored record reads
	// into the persistence struct and writes back every value it had
	// (fields added since, e.g. the wind floor mark, come out at their zero
	// value).
	records := 0
	for name, kv := range after {
		if !strings.HasPrefix(name, "pipeline/") || !strings.HasSuffix(name, "/hours") {
			continue
		}
		for k, raw := range kv {
			var hs struct {
				CarryIn Carry           `json:"carry_in"`
				Record  json.RawMessage `json:"record"`
			}
			require.NoError(t, json.Unmarshal(raw, &hs))
			if hs.Record == nil {
				continue
			}
			rec, err := DecodeRecord(hs.Record)
			require.NoError(t, err, "%s %x", name, k)
			require.False(t, rec.Start.IsZero())
			again, err := EncodeRecord(rec)
			require.NoError(t, err)
			var want, got any
			require.NoError(t, json.Unmarshal(hs.Record, &want))
			require.NoError(t, json.Unmarshal(again, &got))
			assertSubset(t, want, got, fmt.Sprintf("%s %x", name, k))
			records++
		}
	}
	assert.Greater(t, records, 50, "the file holds the closed hours of two days of three stations")

	// The backup is the untouched original, kept until the next start.
	backup := BackupPath(path, 1)
	assert.Equal(t, before, dump(t, backup))
	db, err := Open(path)
	require.NoError(t, err)
	require.NoError(t, db.Close())
	_, err = os.Stat(backup)
	assert.True(t, os.IsNotExist(err), "the backup is removed after a start without migration")
}

// openDump opens the file at path (migrating it), checks it is at Version,
// and returns its dump.
func openDump(t *testing.T, path string) map[string]map[string][]byte {
	t.Helper()
	db, err := Open(path)
	require.NoError(t, err)
	v, err := FileVersion(db)
	require.NoError(t, err)
	assert.Equal(t, Version, v)
	require.NoError(t, db.Close())
	return dump(t, path)
}

// isStationMeta and isStationHeld name a station's meta bucket and the
// bucket of readings held for the future (new in version 3) in a dump.
func isStationMeta(name string) bool {
	return strings.HasPrefix(name, "pipeline/") && strings.HasSuffix(name, "/meta")
}

func isStationHeld(name string) bool {
	return strings.HasPrefix(name, "pipeline/") && strings.HasSuffix(name, "/held")
}

// v2File is a state file written by the release of schema version 2 (made by
// testdata/state/gen/gen.sh v2): two days of the demo farm and a few points
// pending in the outbox.
const v2File = "../../testdata/state/v2-tallowwood.db"

// TestMigrateV2: the committed version-2 file opens at Version. Every
// station that closed hours gets the closed-through mark equal to its cursor
// (the end of its latest closed hour) and an empty bucket of held readings;
// the history's points are renamed (TestMigrateStoredPoints); every other
// row is byte for byte what it was.
func TestMigrateV2(t *testing.T) {
	path := copyTo(t, v2File)
	before := dump(t, path)
	require.Equal(t, []byte{0, 0, 0, 0, 0, 0, 0, 2}, before[string(BucketMeta)]["schema_version"])

	after := openDump(t, path)

	stations := 0
	for name, kv := range before {
		switch {
		case name == string(BucketMeta):
			assert.Equal(t, []byte{0, 0, 0, 0, 0, 0, 0, 3}, after[name]["schema_version"])
		case name == string(BucketHistory):
			// Renamed to the version-3 names: TestMigrateStoredPoints.
			assert.Len(t, after[name], len(kv))
		case isStationMeta(name):
			stations++
			require.Len(t, kv["cursor"], 8, name)
			hours := before[strings.TrimSuffix(name, "/meta")+"/hours"]
			require.NotEmpty(t, hours, "%s: two days of the demo close hours", name)
			want := maps.Clone(kv)
			want["closed_through"] = kv["cursor"]
			assert.Equal(t, want, after[name], name)
			held := strings.TrimSuffix(name, "/meta") + "/held"
			m, ok := after[held]
			assert.True(t, ok && len(m) == 0, "%s: an empty bucket", held)
		default:
			assert.Equal(t, kv, after[name], "bucket %s changed", name)
		}
	}
	assert.Equal(t, 3, stations, "the demo farm has three stations")
	for name := range after {
		_, was := before[name]
		assert.True(t, was || isStationHeld(name), "new bucket %s", name)
	}
	assert.Equal(t, before, dump(t, BackupPath(path, 2)), "the backup is the untouched original")
}

// TestMigrate2to3Unmarked: a version-2 station that has a cursor but never
// closed an hour (its first hour is open, nothing pending) gets no mark; one
// whose hours were all pruned but whose cursor is past its watermark (the
// wall clock closed its hours) gets the mark.
func TestMigrate2to3Unmarked(t *testing.T) {
	path := filepath.Join(t.TempDir(), "v2.db")
	db, err := bbolt.Open(path, 0o600, nil)
	require.NoError(t, err)
	be := func(t time.Time) []byte { return binary.BigEndian.AppendUint64(nil, uint64(t.UnixNano())) }
	h := time.Date(2026, 3, 1, 10, 0, 0, 0, time.UTC)
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
		m, _ := tx.CreateBucket(BucketMeta)
		_ = m.Put(keyVersion, binary.BigEndian.AppendUint64(nil, 2))
		root, _ := tx.CreateBucket(BucketPipeline)
		for name, wm := range map[string]time.Time{"s/open": h.Add(20 * time.Minute), "s/quiet": h.Add(-3 * time.Hour)} {
			sb, _ := root.CreateBucket([]byte(name))
			for _, b := range []string{"samples", "hours", "meta", "counters", "seen"} {
				_, _ = sb.CreateBucket([]byte(b))
			}
			_ = sb.Bucket([]byte("meta")).Put([]byte("cursor"), be(h))
			_ = sb.Bucket([]byte("meta")).Put([]byte("watermark"), be(wm))
		}
		return nil
	}))
	require.NoError(t, db.Close())
	db, err = Open(path)
	require.NoError(t, err)
	require.NoError(t, db.Close())
	after := dump(t, path)
	assert.NotContains(t, after["pipeline/s/open/meta"], "closed_through")
	assert.Equal(t, be(h), after["pipeline/s/quiet/meta"]["closed_through"])
	assert.Contains(t, after, "pipeline/s/open/held")
}

// TestNewFileGetsVersion: a new file carries the version from creation.
func TestNewFileGetsVersion(t *testing.T) {
	path := filepath.Join(t.TempDir(), "new.db")
	db, err := Open(path)
	require.NoError(t, err)
	v, err := FileVersion(db)
	require.NoError(t, err)
	assert.Equal(t, Version, v)
	require.NoError(t, db.Close())
	_, err = os.Stat(BackupPath(path, 1))
	assert.True(t, os.IsNotExist(err), "nothing to back up")
}

// TestNewerVersionRefused: a file from a newer etpulse is refused, naming
// both versions, and left as it was.
func TestNewerVersionRefused(t *testing.T) {
	path := filepath.Join(t.TempDir(), "newer.db")
	db, err := Open(path)
	require.NoError(t, err)
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error { return setVersion(tx, Version+3) }))
	require.NoError(t, db.Close())
	_, err = Open(path)
	require.ErrorIs(t, err, ErrNewerVersion)
	assert.Contains(t, err.Error(), fmt.Sprintf("schema version %d, this etpulse reads up to %d", Version+3, Version))
	assert.Equal(t, map[string][]byte{string(keyVersion): binary.BigEndian.AppendUint64(nil, uint64(Version+3))}, dump(t, path)[string(BucketMeta)])
}

// TestNotAStateFileRefused: a file that is not a bbolt database, and a
// bbolt database of another program, are refused and left alone.
func TestNotAStateFileRefused(t *testing.T) {
	dir := t.TempDir()
	text := filepath.Join(dir, "farm.yaml")
	require.NoError(t, os.WriteFile(text, bytes.Repeat([]byte("sites: []\n"), 1000), 0o600))
	_, err := Open(text)
	require.ErrorIs(t, err, ErrNotStateFile)
	assert.Contains(t, err.Error(), "check state.path")
	b, err := os.ReadFile(text)
	require.NoError(t, err)
	assert.True(t, strings.HasPrefix(string(b), "sites: []"))

	other := filepath.Join(dir, "other.db")
	odb, err := bbolt.Open(other, 0o600, nil)
	require.NoError(t, err)
	require.NoError(t, odb.Update(func(tx *bbolt.Tx) error { _, err := tx.CreateBucket([]byte("invoices")); return err }))
	require.NoError(t, odb.Close())
	_, err = Open(other)
	require.ErrorIs(t, err, ErrNotStateFile)
	assert.Contains(t, err.Error(), `"invoices"`)
}

// TestLockedFile: a second opener gets ErrLocked instead of waiting forever.
func TestLockedFile(t *testing.T) {
	if testing.Short() {
		t.Skip("waits for the lock timeout")
	}
	path := filepath.Join(t.TempDir(), "held.db")
	db, err := Open(path)
	require.NoError(t, err)
	defer db.Close()
	_, err = Open(path)
	assert.True(t, errors.Is(err, ErrLocked), "%v", err)
}

// assertSubset checks that every value of want (decoded JSON) is in got.
func assertSubset(t *testing.T, want, got any, where string) {
	t.Helper()
	wm, ok := want.(map[string]any)
	if !ok {
		assert.Equal(t, want, got, where)
		return
	}
	gm, ok := got.(map[string]any)
	if !assert.True(t, ok, "%s: not an object", where) {
		return
	}
	for k, v := range wm {
		assertSubset(t, v, gm[k], where+"."+k)
	}
}

// TestOpenReadOnly: a reader refuses a file of an older version (its
// stored points have the names before version 3, which no reader reads any
// more), saying how to migrate it, and leaves it as it is (no version
// written, no backup); it opens a file of this version, refuses a newer
// file, and says when a file is missing.
func TestOpenReadOnly(t *testing.T) {
	for _, old := range []string{v1File, v2File} {
		path := copyTo(t, old)
		before := dump(t, path)
		_, err := OpenReadOnly(path)
		require.ErrorIs(t, err, ErrOlderVersion, old)
		assert.Contains(t, err.Error(), "start the gateway once with this etpulse (etpulse run)", old)
		assert.Equal(t, before, dump(t, path))
		_, err = os.Stat(BackupPath(path, 1))
		assert.True(t, os.IsNotExist(err))
	}
	current := filepath.Join(t.TempDir(), "current.db")
	db, err := Open(current)
	require.NoError(t, err)
	require.NoError(t, db.Close())
	db, err = OpenReadOnly(current)
	require.NoError(t, err)
	v, err := FileVersion(db)
	require.NoError(t, err)
	assert.Equal(t, Version, v)
	require.NoError(t, db.Close())

	newer := filepath.Join(t.TempDir(), "newer.db")
	db, err = Open(newer)
	require.NoError(t, err)
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error { return setVersion(tx, Version+1) }))
	require.NoError(t, db.Close())
	_, err = OpenReadOnly(newer)
	assert.ErrorIs(t, err, ErrNewerVersion)

	_, err = OpenReadOnly(filepath.Join(t.TempDir(), "absent.db"))
	assert.ErrorIs(t, err, os.ErrNotExist)
}
