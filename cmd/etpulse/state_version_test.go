package main

import (
	"bytes"
	"context"
	"encoding/binary"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"
)

// TestRunRefusesNewerStateFile: a state file written by a newer etpulse
// (schema version above this binary's) stops the daemon before anything
// starts, with exit 2 and a message naming both versions.
func TestRunRefusesNewerStateFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "s.db")
	db, err := bbolt.Open(path, 0o600, nil)
	require.NoError(t, err)
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
		b, err := tx.CreateBucket([]byte("state.meta"))
		if err != nil {
			return err
		}
		return b.Put([]byte("schema_version"), binary.BigEndian.AppendUint64(nil, 99))
	}))
	require.NoError(t, db.Close())
	b, err := os.ReadFile("../../testdata/config/minimal.yaml")
	require.NoError(t, err)
	doc := strings.Replace(string(b), "sites:", "state: {path: '"+path+"'}\nhttp: {disabled: true}\nsites:", 1)
	f := filepath.Join(dir, "c.yaml")
	require.NoError(t, os.WriteFile(f, []byte(doc), 0o600))
	var out, errb bytes.Buffer
	code := run(context.Background(), []string{"run", "--config", f}, strings.NewReader(""), &out, &errb)
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errb.String(), "schema version 99, this etpulse reads up to")
}
