package quality

import (
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
)

// The reading-level checks of a plausible reading with no alert active
// allocate nothing: the good verdicts that would change no alert are not
// built (messages formatted, a slice grown) for every reading. Allocations
// are counted, not timed.
func TestObserveSampleAllocations(t *testing.T) {
	observe, mon := plausibleReadings(t, 10*time.Second)
	for range 8 {
		observe()
	}
	assert.LessOrEqual(t, testing.AllocsPerRun(400, observe), 0.1)
	assert.Empty(t, mon.state, "no alert raised by plausible readings")
}
