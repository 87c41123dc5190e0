package state

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
	"os"
	"time"
)

// The reading journal is an append-only file beside the state file
// (JournalPath) that makes received messages durable cheaply: the gateway
// appends a window of messages with one write and one fdatasync, then
// acknowledges them, and writes them into the state file (a checkpoint)
// only every few minutes, after which it empties the journal. At the next
// start the messages still in it are stored again; the pipeline drops the
// readings it already holds, so a message stored twice counts once.
//
// Layout: the header journalMagic (the format's version), then a sequence
// of entries, each
//
//	size(4) crc32c(4) received(8) topic_len(2) topic payload
//
// big-endian; size counts the bytes after the crc, the Castagnoli CRC
// covers them, received is Unix nanoseconds. A torn entry at the end (a
// crash during an append, before its messages were acknowledged) is cut
// off when the journal is opened.

// JournalEntry is one received MQTT message in the journal.
type JournalEntry struct {
	Received time.Time
	Topic    string
	Payload  []byte
}

// JournalPath is the journal of the state file at statePath.
func JournalPath(statePath string) string { return statePath + ".journal" }

// Journal is an open reading journal. It is used by one goroutine.
type Journal struct {
	f    *os.File
	path string
	size int64
	buf  []byte
}

var journalCRC = crc32.MakeTable(crc32.Castagnoli)

const journalHead = 4 + 4 + 8 + 2

// journalMagic opens every journal: its format, version 1. A later layout
// gets a new header, and a journal whose header is not one this build
// reads is refused rather than taken for empty.
const journalMagic = "etpulse-jrnl-v1\n"

// ErrForeignJournal is returned for a journal file whose header is not one
// this build reads (a newer etpulse wrote it, or it is not a journal).
var ErrForeignJournal = errors.New("not a reading journal of format 1")

// maxJournalEntry bounds one entry; a larger size field is a torn or
// foreign file, not an entry.
const maxJournalEntry = 16 << 20

// OpenJournal opens (creating if needed) the journal at path and returns
// the entries it holds, in the order they were appended. A torn or
// corrupt tail is cut off.
func OpenJournal(path string) (*Journal, []JournalEntry, error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o600)
	if err != nil {
		return nil, nil, fmt.Errorf("open journal %s: %w", path, err)
	}
	entries, good, err := readJournal(f)
	if err != nil {
		_ = f.Close()
		return nil, nil, fmt.Errorf("open journal %s: %w", path, err)
	}
	if good == 0 { // new, or its header torn: nothing was acknowledged
		if _, err := f.WriteAt([]byte(journalMagic), 0); err != nil {
			_ = f.Close()
			return nil, nil, fmt.Errorf("open journal %s: write header: %w", path, err)
		}
		good = int64(len(journalMagic))
	}
	if err := f.Truncate(good); err != nil {
		_ = f.Close()
		return nil, nil, fmt.Errorf("open journal %s: cut torn tail at %d: %w", path, good, err)
	}
	return &Journal{f: f, path: path, size: good}, entries, nil
}

// ReadJournal returns the entries of the journal at path without changing
// it (a missing journal has none): for tools and tests beside a gateway.
func ReadJournal(path string) ([]JournalEntry, error) {
	f, err := os.Open(path)
	if errors.Is(err, os.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("read journal %s: %w", path, err)
	}
	defer f.Close()
	entries, _, err := readJournal(f)
	if err != nil {
		return nil, fmt.Errorf("read journal %s: %w", path, err)
	}
	return entries, nil
}

// readJournal reads whole entries from the start of f and returns them with
// the offset after the last good one.
func readJournal(f *os.File) ([]JournalEntry, int64, error) {
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return nil, 0, err
	}
	r := bufio.NewReader(f)
	var (
		out  []JournalEntry
		good int64
		head [8]byte
	)
	magic := make([]byte, len(journalMagic))
	if n, err := io.ReadFull(r, magic); err != nil {
		if n > 0 && string(magic[:n]) != journalMagic[:n] {
			return nil, 0, fmt.Errorf("%w: it begins %q; move it away if it is not etpulse's", ErrForeignJournal, magic[:n])
		}
		return nil, 0, nil // empty, or a torn header
	}
	if string(magic) != journalMagic {
		return nil, 0, fmt.Errorf("%w: it begins %q (a newer etpulse writes another format: upgrade, or move the file away to drop the readings it holds)", ErrForeignJournal, magic)
	}
	good = int64(len(journalMagic))
	for {
		if _, err := io.ReadFull(r, head[:]); err != nil {
			return out, good, nil // end, or a torn head
		}
		size := binary.BigEndian.Uint32(head[:4])
		if size < journalHead-8 || size > maxJournalEntry {
			return out, good, nil
		}
		body := make([]byte, size)
		if _, err := io.ReadFull(r, body); err != nil {
			return out, good, nil
		}
		if crc32.Checksum(body, journalCRC) != binary.BigEndian.Uint32(head[4:]) {
			return out, good, nil
		}
		tl := int(binary.BigEndian.Uint16(body[8:10]))
		if 10+tl > len(body) {
			return out, good, nil
		}
		out = append(out, JournalEntry{
			Received: time.Unix(0, int64(binary.BigEndian.Uint64(body[:8]))),
			Topic:    string(body[10 : 10+tl]),
			Payload:  body[10+tl:],
		})
		good += 8 + int64(size)
	}
}

// Append writes entries at the end of the journal with one write and makes
// them durable (fdatasync) before it returns.
func (j *Journal) Append(entries []JournalEntry) error {
	if len(entries) == 0 {
		return nil
	}
	b := j.buf[:0]
	for _, e := range entries {
		if len(e.Topic) > 0xffff {
			return fmt.Errorf("journal append: topic of %d bytes, at most 65535", len(e.Topic))
		}
		size := 8 + 2 + len(e.Topic) + len(e.Payload)
		if size > maxJournalEntry {
			return fmt.Errorf("journal append: message of %d bytes on %s, at most %d", len(e.Payload), e.Topic, maxJournalEntry)
		}
		at := len(b)
		b = binary.BigEndian.AppendUint32(b, uint32(size))
		b = append(b, 0, 0, 0, 0)
		b = binary.BigEndian.AppendUint64(b, uint64(e.Received.UnixNano()))
		b = binary.BigEndian.AppendUint16(b, uint16(len(e.Topic)))
		b = append(b, e.Topic...)
		b = append(b, e.Payload...)
		binary.BigEndian.PutUint32(b[at+4:], crc32.Checksum(b[at+8:], journalCRC))
	}
	j.buf = b
	if _, err := j.f.WriteAt(b, j.size); err != nil {
		return fmt.Errorf("journal append %s: %w", j.path, err)
	}
	if err := datasync(j.f); err != nil {
		return fmt.Errorf("journal append %s: sync: %w", j.path, err)
	}
	j.size += int64(len(b))
	return nil
}

// Size is the length in bytes of the journal's entries (0 when empty).
func (j *Journal) Size() int64 { return j.size - int64(len(journalMagic)) }

// Reset empties the journal, once its entries are in the state file. It
// does not sync: should the truncation be lost, the next start stores the
// entries again, which changes nothing.
func (j *Journal) Reset() error {
	if j.Size() == 0 {
		return nil
	}
	if err := j.f.Truncate(int64(len(journalMagic))); err != nil {
		return fmt.Errorf("journal reset %s: %w", j.path, err)
	}
	j.size = int64(len(journalMagic))
	return nil
}

// Close closes the journal file.
func (j *Journal) Close() error {
	if j == nil || j.f == nil {
		return nil
	}
	err := j.f.Close()
	j.f = nil
	if err != nil && !errors.Is(err, os.ErrClosed) {
		return fmt.Errorf("close journal %s: %w", j.path, err)
	}
	return nil
}
