package zones

import (
	"bytes"
	"encoding/json"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/controllers"
)

// longNumbers returns the numbers of a JSON payload written with more than
// places decimals (e.g. 3.3300000000000005 for places 2).
func longNumbers(t *testing.T, payload []byte, places int) []string {
	t.Helper()
	dec := json.NewDecoder(bytes.NewReader(payload))
	dec.UseNumber()
	var v any
	require.NoError(t, dec.Decode(&v))
	var long []string
	var walk func(any)
	walk = func(v any) {
		switch x := v.(type) {
		case map[string]any:
			for _, e := range x {
				walk(e)
			}
		case []any:
			for _, e := range x {
				walk(e)
			}
		case json.Number:
			if i := strings.IndexByte(string(x), '.'); i >= 0 && len(x)-i-1 > places {
				long = append(long, string(x))
			}
		}
	}
	walk(v)
	return long
}

// A command's reason carries depths to 0.01 mm (gateway/internal/precision),
// not the balance's full float precision.
func TestCommandMessageRounded(t *testing.T) {
	c := controllers.Command{ID: "row-a-1", Zone: "row-a", Valve: "v1", Minutes: 37,
		Start: time.Date(2026, 7, 1, 20, 0, 0, 0, time.UTC), Expiry: time.Date(2026, 7, 1, 23, 0, 0, 0, time.UTC),
		Cycle: 1, Cycles: 1, Attempts: 1,
		Reason: controllers.Reason{DepletionMM: 27.169999999999998, TriggerMM: 26.000000000000004,
			EtcSinceLastMM: 3.3300000000000005, Basis: controllers.BasisProjected, ProjectedMM: 28.123456789, ShortMM: 0.21539289829921476}}
	b, err := json.Marshal(commandMessage(&c))
	require.NoError(t, err)
	assert.Empty(t, longNumbers(t, b, 2), "%s", b)
	m, err := DecodeCommand(b)
	require.NoError(t, err)
	assert.Equal(t, 27.17, m.Reason.DepletionMM)
	assert.Equal(t, 0.22, m.Reason.ShortMM)
}

// A water reply's depths are rounded to 0.01 mm. 1234 L on a Fernhill
// zone (1000 m2, efficiency 0.9): 1234 / 1000 x 0.9 = 1.1106 mm net, and
// the depletion falls from 30.5 to 29.3894 mm.
func TestWaterReplyRounded(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 20, 0, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, start)
	f.hour(t, record(time.Date(2026, 7, 1, 9, 0, 0, 0, fernLoc), 0.5, 0))
	r := f.water(t, `{"id":"w1","zone":"row-a","kind":"applied","volume_l":1234,"who":"Ana","why":"hand run"}`)
	require.True(t, r.OK, r.Error)
	b, err := json.Marshal(r)
	require.NoError(t, err)
	assert.Empty(t, longNumbers(t, b, 2), "%s", b)
	assert.Equal(t, 1.11, *r.NetMM)
	assert.Equal(t, 29.39, *r.DepletionMM)
}
