package state

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"slices"
)

// A frozen copy of the store's point encoding, codec version 1 (the values
// of the outbox and history buckets), and of the key that names a point's
// series, as they were when schema version 3 was made. The migrations read
// and write stored points through these, so the store's codec may change
// later without changing what an old migration does. The layout:
//
//	version byte (1)
//	class, measurement: uvarint length + bytes
//	time: varint Unix nanoseconds
//	tag count uvarint, then key, value (length-prefixed), sorted by key
//	field count uvarint, then key and a type byte:
//	  'f' float64 (8 bytes little endian), 'i' int64 (varint),
//	  'b' bool (1 byte), 's' string (length-prefixed)
//	note count uvarint, then key, value (length-prefixed), sorted by key
const pointCodecV1 = 1

var errPointCorrupt = errors.New("corrupt point encoding")

// pointV1 is a stored point as codec version 1 holds it. Fields hold
// float64, int64, bool or string values.
type pointV1 struct {
	Class       string
	Measurement string
	Time        int64 // Unix nanoseconds
	Tags        map[string]string
	Fields      map[string]any
	Notes       map[string]string
}

// appendPointV1 encodes p as codec version 1.
func appendPointV1(dst []byte, p pointV1) []byte {
	dst = append(dst, pointCodecV1)
	dst = appendStringV1(dst, p.Class)
	dst = appendStringV1(dst, p.Measurement)
	dst = binary.AppendVarint(dst, p.Time)
	dst = binary.AppendUvarint(dst, uint64(len(p.Tags)))
	for _, k := range sortedKeysV1(p.Tags) {
		dst = appendStringV1(dst, k)
		dst = appendStringV1(dst, p.Tags[k])
	}
	dst = binary.AppendUvarint(dst, uint64(len(p.Fields)))
	for _, k := range sortedKeysV1(p.Fields) {
		dst = appendStringV1(dst, k)
		switch x := p.Fields[k].(type) {
		case float64:
			dst = append(dst, 'f')
			dst = binary.LittleEndian.AppendUint64(dst, math.Float64bits(x))
		case int64:
			dst = append(dst, 'i')
			dst = binary.AppendVarint(dst, x)
		case bool:
			dst = append(dst, 'b')
			if x {
				dst = append(dst, 1)
			} else {
				dst = append(dst, 0)
			}
		case string:
			dst = append(dst, 's')
			dst = appendStringV1(dst, x)
		}
	}
	dst = binary.AppendUvarint(dst, uint64(len(p.Notes)))
	for _, k := range sortedKeysV1(p.Notes) {
		dst = appendStringV1(dst, k)
		dst = appendStringV1(dst, p.Notes[k])
	}
	return dst
}

func appendStringV1(dst []byte, s string) []byte {
	dst = binary.AppendUvarint(dst, uint64(len(s)))
	return append(dst, s...)
}

func sortedKeysV1[V any](m map[string]V) []string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	return keys
}

// decodePointV1 decodes what appendPointV1 wrote; the result shares no
// memory with b.
func decodePointV1(b []byte) (pointV1, error) {
	d := pointDecoderV1{b: b}
	if v := d.byte(); v != pointCodecV1 {
		return pointV1{}, fmt.Errorf("decode point: %w: codec version %d, want %d", errPointCorrupt, v, pointCodecV1)
	}
	p := pointV1{Class: d.string(), Measurement: d.string(), Time: d.varint()}
	if n := d.count(); n > 0 {
		p.Tags = make(map[string]string, n)
		for range n {
			k := d.string()
			p.Tags[k] = d.string()
		}
	}
	n := d.count()
	p.Fields = make(map[string]any, n)
	for range n {
		k := d.string()
		switch t := d.byte(); t {
		case 'f':
			p.Fields[k] = math.Float64frombits(d.uint64())
		case 'i':
			p.Fields[k] = d.varint()
		case 'b':
			p.Fields[k] = d.byte() == 1
		case 's':
			p.Fields[k] = d.string()
		default:
			d.fail()
		}
	}
	if n := d.count(); n > 0 {
		p.Notes = make(map[string]string, n)
		for range n {
			k := d.string()
			p.Notes[k] = d.string()
		}
	}
	if d.err != nil {
		return pointV1{}, fmt.Errorf("decode point: %w", d.err)
	}
	return p, nil
}

type pointDecoderV1 struct {
	b   []byte
	err error
}

func (d *pointDecoderV1) fail() {
	if d.err == nil {
		d.err = errPointCorrupt
	}
	d.b = nil
}

func (d *pointDecoderV1) byte() byte {
	if len(d.b) < 1 {
		d.fail()
		return 0
	}
	c := d.b[0]
	d.b = d.b[1:]
	return c
}

func (d *pointDecoderV1) uint64() uint64 {
	if len(d.b) < 8 {
		d.fail()
		return 0
	}
	v := binary.LittleEndian.Uint64(d.b)
	d.b = d.b[8:]
	return v
}

func (d *pointDecoderV1) varint() int64 {
	v, n := binary.Varint(d.b)
	if n <= 0 {
		d.fail()
		return 0
	}
	d.b = d.b[n:]
	return v
}

// count reads a collection length, bounded by the bytes left.
func (d *pointDecoderV1) count() int {
	v, n := binary.Uvarint(d.b)
	if n <= 0 || v > uint64(len(d.b)) {
		d.fail()
		return 0
	}
	d.b = d.b[n:]
	return int(v)
}

func (d *pointDecoderV1) string() string {
	l := d.count()
	if l > len(d.b) {
		d.fail()
		return ""
	}
	s := string(d.b[:l])
	d.b = d.b[l:]
	return s
}

// seriesKeyV1 is the key of p in the history and in outbox/series: its time
// as 8 bytes that sort in time order (Unix nanoseconds with the sign bit
// flipped, big-endian), then the measurement and the tags sorted by key,
// escaped as they start a line of line protocol.
func seriesKeyV1(p pointV1) []byte {
	dst := binary.BigEndian.AppendUint64(nil, uint64(p.Time)^(1<<63))
	dst = appendEscapedV1(dst, p.Measurement, ", ")
	for _, k := range sortedKeysV1(p.Tags) {
		dst = append(dst, ',')
		dst = appendEscapedV1(dst, k, ",= ")
		dst = append(dst, '=')
		dst = appendEscapedV1(dst, p.Tags[k], ",= ")
	}
	return dst
}

func appendEscapedV1(dst []byte, s, escapes string) []byte {
	for i := 0; i < len(s); i++ {
		for j := 0; j < len(escapes); j++ {
			if s[i] == escapes[j] {
				dst = append(dst, '\\')
				break
			}
		}
		dst = append(dst, s[i])
	}
	return dst
}
