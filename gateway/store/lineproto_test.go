package store

import (
	"bytes"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"pgregory.net/rapid"
)

func TestLineEscapes(t *testing.T) {
	// Escaping rules of InfluxDB line protocol (reference, "Special
	// characters"; from memory): measurement escapes comma and space; tag
	// keys, tag values and field keys escape comma, equals and space; string
	// field values escape double quote and backslash.
	p := Point{
		Measurement: "my meas,x",
		Tags:        map[string]string{"a b": "c=d,e"},
		Fields:      map[string]any{"f g": `say "hi" \ ok`, "n": int64(-3), "x": 1e-9, "y": 2.0, "z": false},
		Time:        time.Unix(1, 5),
	}
	require.NoError(t, Validate(p))
	assert.Equal(t, `my\ meas\,x,a\ b=c\=d\,e f\ g="say \"hi\" \\ ok",n=-3i,x=1e-09,y=2,z=false 1000000005`, Line(p))
}

func TestValidate(t *testing.T) {
	ok := func() Point {
		return Point{Measurement: "m", Tags: map[string]string{"site": "a"}, Fields: map[string]any{"v": 1.0}, Time: t0}
	}
	cases := []struct {
		name string
		edit func(*Point)
		want string
	}{
		{"empty measurement", func(p *Point) { p.Measurement = "" }, "empty measurement"},
		{"reserved measurement", func(p *Point) { p.Measurement = "_m" }, `measurement "_m" is reserved`},
		{"newline in measurement", func(p *Point) { p.Measurement = "a\nb" }, "control character U+000A"},
		{"empty tag value", func(p *Point) { p.Tags["zone"] = "" }, `tag "zone": empty value`},
		{"tag value with backslash at end", func(p *Point) { p.Tags["zone"] = `a\` }, "ends in a backslash"},
		{"time tag key", func(p *Point) { p.Tags["time"] = "x" }, `tag key "time" is reserved`},
		{"no fields", func(p *Point) { p.Fields = nil }, "no fields"},
		{"NaN", func(p *Point) { p.Fields["v"] = math.NaN() }, `field "v": NaN is not a finite number`},
		{"Inf", func(p *Point) { p.Fields["v"] = math.Inf(-1) }, `field "v": -Inf is not a finite number`},
		{"unsupported type", func(p *Point) { p.Fields["v"] = []int{1} }, `field "v": unsupported type []int`},
		{"tag and field share a key", func(p *Point) { p.Fields["site"] = 1.0 }, `"site" is both a tag and a field`},
		{"before 1970", func(p *Point) { p.Time = time.Date(1969, 12, 31, 0, 0, 0, 0, time.UTC) }, "before 1970-01-01"},
		{"zero time", func(p *Point) { p.Time = time.Time{} }, "before 1970-01-01"},
		{"invalid utf-8", func(p *Point) { p.Tags["site"] = "\xff" }, "not valid UTF-8"},
		{"long string", func(p *Point) { p.Fields["s"] = strings.Repeat("x", maxStringLen+1) }, "at most 16384"},
	}
	require.NoError(t, Validate(ok()))
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p := ok()
			c.edit(&p)
			err := Validate(p)
			require.ErrorIs(t, err, ErrInvalidPoint)
			assert.Contains(t, err.Error(), c.want)
		})
	}
}

func TestCheckTime(t *testing.T) {
	now := t0
	require.NoError(t, CheckTime(now.Add(47*time.Hour), now, 48*time.Hour, 0))
	err := CheckTime(now.Add(49*time.Hour), now, 48*time.Hour, 0)
	require.ErrorIs(t, err, ErrInvalidPoint)
	assert.Contains(t, err.Error(), "more than 48h0m0s ahead")
	require.NoError(t, CheckTime(now.Add(-1000*time.Hour), now, 48*time.Hour, 0), "no retention limit")
	assert.ErrorContains(t, CheckTime(now.Add(-25*time.Hour), now, 48*time.Hour, 24*time.Hour), "older than the store retention 24h0m0s")
}

func TestNormalizeDoesNotTouchCallerMap(t *testing.T) {
	f := map[string]any{"n": 3}
	p := normalize(Point{Fields: f})
	assert.Equal(t, int64(3), p.Fields["n"])
	assert.Equal(t, 3, f["n"])
}

// drawPoint draws a valid point with names and values that need escapes,
// every field type, and sometimes notes.
func drawPoint(t *rapid.T) Point {
	name := rapid.StringMatching(`[a-z][a-z0-9_ ,=]{0,12}`)
	p := Point{
		Class:       Class(rapid.SampledFrom([]Class{ClassHour, ClassRaw, ClassZone, ClassAlert}).Draw(t, "class")),
		Measurement: name.Draw(t, "measurement"),
		Tags:        rapid.MapOf(name, rapid.StringMatching(`[a-zA-Z0-9 =,"]{1,10}`)).Draw(t, "tags"),
		Fields:      map[string]any{},
		Time:        time.Unix(0, rapid.Int64Range(0, 1<<62).Draw(t, "ns")).UTC(),
	}
	for i, k := range rapid.SliceOfNDistinct(name, 1, 8, func(s string) string { return s }).Draw(t, "fields") {
		if _, clash := p.Tags[k]; clash {
			continue
		}
		switch i % 4 {
		case 0:
			p.Fields[k] = rapid.Float64().Draw(t, k)
		case 1:
			p.Fields[k] = rapid.Int64().Draw(t, k)
		case 2:
			p.Fields[k] = rapid.Bool().Draw(t, k)
		case 3:
			p.Fields[k] = rapid.String().Draw(t, k)
		}
	}
	if len(p.Tags) == 0 {
		p.Tags = nil
	}
	if rapid.Bool().Draw(t, "notes") {
		p.Notes = map[string]string{"flags": rapid.String().Draw(t, "flags")}
	}
	return p
}

// TestCodecRoundTrip: any valid point decodes to itself.
func TestCodecRoundTrip(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		p := drawPoint(t)
		got, err := decodePoint(appendPoint(nil, p))
		require.NoError(t, err)
		require.Equal(t, p, got)
		// Any truncation is an error, never a panic.
		enc := appendPoint(nil, p)
		cut := rapid.IntRange(0, len(enc)-1).Draw(t, "cut")
		_, err = decodePoint(enc[:cut])
		require.Error(t, err)
	})
}

// TestLineFromEncoding: the drain renders a pending point's line straight
// from its stored encoding, byte for byte the line of the decoded point,
// with its time, its series key and its class; a truncated encoding is an
// error (nothing appended), never a panic.
func TestLineFromEncoding(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		p := drawPoint(t)
		enc := appendPoint(nil, p)
		prefix := []byte("kept\n")
		got, info, err := appendLineEncoded(bytes.Clone(prefix), enc)
		require.NoError(t, err)
		require.Equal(t, string(prefix)+Line(p), string(got))
		require.True(t, p.Time.Equal(info.time))
		require.Equal(t, string(appendSeries(nil, p.Measurement, p.Tags)), string(got[len(prefix):len(prefix)+info.series]))
		require.Equal(t, p.Class == ClassRaw, info.raw)
		cut := rapid.IntRange(0, len(enc)-1).Draw(t, "cut")
		got, _, err = appendLineEncoded(bytes.Clone(prefix), enc[:cut])
		require.Error(t, err)
		require.Equal(t, string(prefix), string(got), "no part of a line on error")
	})
}
