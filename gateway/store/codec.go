package store

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"strconv"
	"time"
)

// The binary form of a point in the state file (outbox and history values):
//
//	version byte (1)
//	class, measurement: uvarint length + bytes
//	time: varint Unix nanoseconds
//	tag count uvarint, then key, value (length-prefixed), sorted by key
//	field count uvarint, then key and a type byte:
//	  'f' float64 (8 bytes little endian), 'i' int64 (varint),
//	  'b' bool (1 byte), 's' string (length-prefixed)
//	note count uvarint, then key, value (length-prefixed), sorted by key
const codecVersion = 1

var errCorrupt = errors.New("corrupt point encoding")

// appendPoint encodes a validated point.
func appendPoint(dst []byte, p Point) []byte {
	dst = append(dst, codecVersion)
	dst = appendString(dst, string(p.Class))
	dst = appendString(dst, p.Measurement)
	dst = binary.AppendVarint(dst, p.Time.UnixNano())
	dst = binary.AppendUvarint(dst, uint64(len(p.Tags)))
	for _, k := range sortedKeys(p.Tags) {
		dst = appendString(dst, k)
		dst = appendString(dst, p.Tags[k])
	}
	dst = binary.AppendUvarint(dst, uint64(len(p.Fields)))
	for _, k := range sortedKeys(p.Fields) {
		dst = appendString(dst, k)
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
			dst = appendString(dst, x)
		}
	}
	dst = binary.AppendUvarint(dst, uint64(len(p.Notes)))
	for _, k := range sortedKeys(p.Notes) {
		dst = appendString(dst, k)
		dst = appendString(dst, p.Notes[k])
	}
	return dst
}

func appendString(dst []byte, s string) []byte {
	dst = binary.AppendUvarint(dst, uint64(len(s)))
	return append(dst, s...)
}

// decodePoint decodes what appendPoint wrote. The result shares no memory
// with b (bbolt values are only valid inside their transaction).
func decodePoint(b []byte) (Point, error) {
	d := decoder{b: b}
	if v := d.byte(); v != codecVersion {
		return Point{}, fmt.Errorf("decode point: %w: version %d", errCorrupt, v)
	}
	p := Point{Class: Class(d.string()), Measurement: d.string()}
	p.Time = time.Unix(0, d.varint()).UTC()
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
		switch d.byte() {
		case 'f':
			p.Fields[k] = math.Float64frombits(d.uint64())
		case 'i':
			p.Fields[k] = d.varint()
		case 'b':
			p.Fields[k] = d.byte() == 1
		case 's':
			p.Fields[k] = d.string()
		default:
			d.err = errCorrupt
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
		return Point{}, fmt.Errorf("decode point: %w", d.err)
	}
	return p, nil
}

// lineInfo tells what appendLineEncoded found besides the line.
type lineInfo struct {
	time   time.Time
	series int  // length of the series (measurement and tags) at the line's start
	raw    bool // the point is ClassRaw
}

// appendLineEncoded appends the line protocol of the point encoded in b,
// byte for byte what AppendLine renders for decodePoint(b), without building
// the point's maps: tags and fields are stored sorted by key, the order a
// line needs. The drain renders every pending point this way. On error dst
// comes back unchanged.
func appendLineEncoded(dst, b []byte) ([]byte, lineInfo, error) {
	var info lineInfo
	d := decoder{b: b}
	if v := d.byte(); v != codecVersion {
		return dst, info, fmt.Errorf("render point: %w: version %d", errCorrupt, v)
	}
	start := len(dst)
	info.raw = string(d.bytes()) == string(ClassRaw)
	dst = appendEscaped(dst, d.bytes(), measurementEscapes)
	info.time = time.Unix(0, d.varint()).UTC()
	for range d.count() {
		dst = append(dst, ',')
		dst = appendEscaped(dst, d.bytes(), keyEscapes)
		dst = append(dst, '=')
		dst = appendEscaped(dst, d.bytes(), keyEscapes)
	}
	info.series = len(dst) - start
	dst = append(dst, ' ')
	for i := range d.count() {
		if i > 0 {
			dst = append(dst, ',')
		}
		dst = appendEscaped(dst, d.bytes(), keyEscapes)
		dst = append(dst, '=')
		switch d.byte() {
		case 'f':
			dst = appendFloat(dst, math.Float64frombits(d.uint64()))
		case 'i':
			dst = strconv.AppendInt(dst, d.varint(), 10)
			dst = append(dst, 'i')
		case 'b':
			dst = strconv.AppendBool(dst, d.byte() == 1)
		case 's':
			dst = append(dst, '"')
			dst = appendEscaped(dst, d.bytes(), stringEscapes)
			dst = append(dst, '"')
		default:
			d.fail()
		}
	}
	for range d.count() { // notes stay in the local history
		d.bytes()
		d.bytes()
	}
	if d.err != nil {
		return dst[:start], lineInfo{}, fmt.Errorf("render point: %w", d.err)
	}
	dst = append(dst, ' ')
	return strconv.AppendInt(dst, info.time.UnixNano(), 10), info, nil
}

type decoder struct {
	b   []byte
	err error
}

func (d *decoder) fail() {
	if d.err == nil {
		d.err = errCorrupt
	}
	d.b = nil
}

func (d *decoder) byte() byte {
	if len(d.b) < 1 {
		d.fail()
		return 0
	}
	c := d.b[0]
	d.b = d.b[1:]
	return c
}

func (d *decoder) uint64() uint64 {
	if len(d.b) < 8 {
		d.fail()
		return 0
	}
	v := binary.LittleEndian.Uint64(d.b)
	d.b = d.b[8:]
	return v
}

func (d *decoder) varint() int64 {
	v, n := binary.Varint(d.b)
	if n <= 0 {
		d.fail()
		return 0
	}
	d.b = d.b[n:]
	return v
}

// count reads a collection length, bounded by the bytes left so corrupt data
// cannot ask for a huge allocation.
func (d *decoder) count() int {
	v, n := binary.Uvarint(d.b)
	if n <= 0 || v > uint64(len(d.b)) {
		d.fail()
		return 0
	}
	d.b = d.b[n:]
	return int(v)
}

func (d *decoder) string() string { return string(d.bytes()) }

// bytes reads a length-prefixed string without copying it.
func (d *decoder) bytes() []byte {
	l := d.count()
	if l > len(d.b) {
		d.fail()
		return nil
	}
	s := d.b[:l]
	d.b = d.b[l:]
	return s
}
