package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/config"
	"etpulse/gateway/state"
)

// churnedState fills the state file at path with history rows and deletes
// most of them, leaving free pages for compact to return.
func churnedState(t *testing.T, path string) {
	t.Helper()
	db, err := state.Open(path)
	require.NoError(t, err)
	val := bytes.Repeat([]byte{'x'}, 800)
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
		b, err := tx.CreateBucketIfNotExists(state.BucketHistory)
		if err != nil {
			return err
		}
		for i := range 5000 {
			if err := b.Put([]byte{byte(i >> 8), byte(i), 'k'}, val); err != nil {
				return err
			}
		}
		return nil
	}))
	require.NoError(t, db.Update(func(tx *bbolt.Tx) error {
		c := tx.Bucket(state.BucketHistory).Cursor()
		for k, _ := c.First(); k != nil; k, _ = c.Next() {
			if k[1]%8 != 0 {
				if err := c.Delete(); err != nil {
					return err
				}
			}
		}
		return nil
	}))
	require.NoError(t, db.Close())
}

func compactCmd(args ...string) (int, string, string) {
	var out, errOut bytes.Buffer
	code := run(context.Background(), append([]string{"compact"}, args...), nil, &out, &errOut)
	return code, out.String(), errOut.String()
}

func TestCompactCommand(t *testing.T) {
	cfgPath := waterConfig(t, "tcp://127.0.0.1:1", "ctest")
	cfg, err := config.Load(cfgPath)
	require.NoError(t, err)
	path := cfg.State.Path
	churnedState(t, path)
	before, err := os.Stat(path)
	require.NoError(t, err)

	code, out, errOut := compactCmd(cfgPath)
	require.Equal(t, exitOK, code, errOut)
	after, err := os.Stat(path)
	require.NoError(t, err)
	assert.Less(t, after.Size(), before.Size())
	assert.Contains(t, out, path)
	assert.Contains(t, out, "in use")
	assert.Contains(t, out, state.CompactBackupPath(path))
	_, err = os.Stat(state.CompactBackupPath(path))
	assert.NoError(t, err, "the original is kept")

	// --state names the file directly; ETPULSE_CONFIG works like the other
	// commands.
	code, _, errOut = compactCmd("--state", path)
	assert.Equal(t, exitOK, code, errOut)
	t.Setenv(configEnv, cfgPath)
	code, _, errOut = compactCmd()
	assert.Equal(t, exitOK, code, errOut)
}

func TestCompactCommandRefusesRunningGateway(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state.db")
	churnedState(t, path)
	db, err := state.Open(path) // the running gateway
	require.NoError(t, err)
	defer db.Close()
	code, _, errOut := compactCmd("--state", path)
	assert.Equal(t, exitError, code)
	assert.Contains(t, errOut, "stop the gateway")
	assert.Contains(t, errOut, path)
	_, err = os.Stat(state.CompactBackupPath(path))
	assert.ErrorIs(t, err, os.ErrNotExist)
}

func TestCompactCommandUsage(t *testing.T) {
	t.Setenv(configEnv, "")
	code, _, errOut := compactCmd()
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errOut, "--state FILE")
	code, _, errOut = compactCmd("--state", "a.db", "--config", "b.yaml")
	assert.Equal(t, exitUsage, code)
	assert.Contains(t, errOut, "not both")
	code, _, errOut = compactCmd("--state", filepath.Join(t.TempDir(), "none.db"))
	assert.Equal(t, exitError, code)
	assert.True(t, strings.Contains(errOut, "no such file"), errOut)
}
