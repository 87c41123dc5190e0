package state

import (
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// Entries appended survive a reopen in order; a torn last entry (a crash
// during an append, before its messages were acknowledged) is cut off and
// the next append follows the good ones; Reset empties the journal.
func TestJournalTornTail(t *testing.T) {
	path := filepath.Join(t.TempDir(), "s.db.journal")
	j, got, err := OpenJournal(path)
	require.NoError(t, err)
	require.Empty(t, got)
	at := time.Date(2024, 7, 9, 10, 0, 0, 0, time.UTC)
	a := JournalEntry{Received: at, Topic: "brindle/m01/ta", Payload: []byte(`{"v":21.5}`)}
	b := JournalEntry{Received: at.Add(time.Second), Topic: "brindle/m02/rh", Payload: []byte("48")}
	require.NoError(t, j.Append([]JournalEntry{a, b}))
	good := j.Size()
	require.NoError(t, j.Append([]JournalEntry{{Received: at, Topic: "brindle/m03/ws", Payload: []byte("2.1")}}))
	require.NoError(t, j.Close())
	require.NoError(t, os.Truncate(path, int64(len(journalMagic))+j.Size()-2)) // the last append torn

	j, got, err = OpenJournal(path)
	require.NoError(t, err)
	require.Len(t, got, 2)
	require.Equal(t, a.Topic, got[0].Topic)
	require.Equal(t, a.Payload, got[0].Payload)
	require.True(t, a.Received.Equal(got[0].Received))
	require.Equal(t, b.Topic, got[1].Topic)
	require.Equal(t, good, j.Size())
	require.NoError(t, j.Reset())
	require.NoError(t, j.Close())
	_, got, err = OpenJournal(path)
	require.NoError(t, err)
	require.Empty(t, got)
}

// A journal whose header is not format 1 (a newer etpulse's, or another
// file) is refused with the way out, not taken for empty: its readings
// were acknowledged.
func TestJournalForeignHeaderRefused(t *testing.T) {
	path := filepath.Join(t.TempDir(), "s.db.journal")
	require.NoError(t, os.WriteFile(path, []byte("etpulse-jrnl-v2\nsomething acknowledged"), 0o600))
	_, _, err := OpenJournal(path)
	require.ErrorIs(t, err, ErrForeignJournal)
	assert.Contains(t, err.Error(), "upgrade, or move the file away")
	_, err = ReadJournal(path)
	require.ErrorIs(t, err, ErrForeignJournal)
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	assert.Equal(t, "etpulse-jrnl-v2\nsomething acknowledged", string(b), "left as it was")
}
