package vocab

import (
	"os"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/internal/precision"
)

// TestReadmeTable keeps the README's table of names equal to the code's.
func TestReadmeTable(t *testing.T) {
	b, err := os.ReadFile("../../README.md")
	require.NoError(t, err)
	assert.Contains(t, string(b), Markdown(), "README.md, \"Names of the quantities\": paste the table from vocab.Markdown()")
}

// TestTable checks every row: a name in lower case with no spaces, a
// meaning, at least one output, and a unit the payload rounding table
// knows (precision.Decimals panics on an unknown one).
func TestTable(t *testing.T) {
	for _, n := range Names() {
		assert.Equal(t, strings.ToLower(n.Name), n.Name)
		assert.NotContains(t, n.Name, " ")
		assert.NotEmpty(t, n.What, n.Name)
		assert.NotZero(t, n.Where, n.Name)
		if n.Unit != "" {
			assert.NotPanics(t, func() { precision.Decimals(n.Unit) }, n.Name)
		}
	}
	assert.Equal(t, 0.22, Round(RadTermMM, 0.21539289829921476), "mm to 0.01")
	assert.Panics(t, func() { Round(Flags, 1) }, "a name without a unit is not rounded")
}
