package controllers

import (
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func TestSprinklerRuntimeHandWorked(t *testing.T) {
	// Nozzles of 15 L/min on a 12 m x 15 m grid: 60 x 15 / (12 x 15) = 900 / 180 = 5 mm/h.
	r, err := SprinklerRate(15, 12, 15)
	require.NoError(t, err)
	assert.InDelta(t, 5.0, r, 1e-12)
	// Net 20 mm at 75 % efficiency: gross 20 / 0.75 = 26.667 mm; at 5 mm/h
	// that is 5.3333 h = 320 minutes exactly.
	assert.Equal(t, 320, GrossMinutes(20, 0.75, r))
	// Net 21 mm: 28 mm gross / 5 mm/h = 5.6 h = 336 minutes.
	assert.Equal(t, 336, GrossMinutes(21, 0.75, r))
	// Net 21.01 mm: 336.16 minutes -> rounded up to 337.
	assert.Equal(t, 337, GrossMinutes(21.01, 0.75, r))
	// And back: 320 minutes credit 320/60 x 5 x 0.75 = 20 mm net.
	assert.InDelta(t, 20.0, NetMM(320, r, 0.75), 1e-9)

	_, err = SprinklerRate(15, 0, 15)
	assert.ErrorIs(t, err, ErrInput)
}

func TestDripRuntimeHandWorked(t *testing.T) {
	// Four 2 L/h emitters per tree, trees on 5 m x 3 m = 15 m2:
	// 2 x 4 / 15 = 0.53333 mm/h.
	r, err := DripRate(2, 4, 15)
	require.NoError(t, err)
	assert.InDelta(t, 0.533333, r, 1e-6)
	// Net 10 mm at 90 %: gross 11.111 mm; 11.111 / 0.53333 = 20.8333 h = 1250 minutes.
	assert.Equal(t, 1250, GrossMinutes(10, 0.9, r))
	// Net 3 mm: 3.3333 mm / 0.53333 = 6.25 h = 375 minutes.
	assert.Equal(t, 375, GrossMinutes(3, 0.9, r))

	_, err = DripRate(2, 0, 15)
	assert.ErrorIs(t, err, ErrInput)
}

func TestSplitCycles(t *testing.T) {
	assert.Equal(t, []int{17, 17, 16}, SplitCycles(50, 20))
	assert.Equal(t, []int{20}, SplitCycles(20, 20))
	assert.Equal(t, []int{11, 10}, SplitCycles(21, 20))
	assert.Equal(t, []int{45}, SplitCycles(45, 0))
	assert.Nil(t, SplitCycles(0, 20))
}

func TestParseWindow(t *testing.T) {
	w, err := ParseWindow("21:00-05:00")
	require.NoError(t, err)
	assert.Equal(t, Window{Start: 1260, End: 300}, w)
	assert.Equal(t, "21:00-05:00", w.String())
	w, err = ParseWindow("04:30-24:00")
	require.NoError(t, err)
	assert.Equal(t, Window{Start: 270, End: 1440}, w)
	assert.Equal(t, "04:30-24:00", w.String())
	w, err = ParseWindow("00:00-24:00")
	require.NoError(t, err)
	s, ok := SlotAt([]Window{w}, stdLoc, at(1, 23, 0))
	require.True(t, ok)
	assert.Equal(t, at(1, 0, 0), s.Start)
	assert.Equal(t, at(2, 0, 0), s.End)
	for _, bad := range []string{"", "21-05", "25:00-05:00", "05:00-05:00", "05:61-06:00"} {
		_, err := ParseWindow(bad)
		assert.ErrorIs(t, err, ErrInput, bad)
	}
}
