package config

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestClimateWindKey: the climate's wind at 2 m is read from wind_2m_m_s,
// and from its old name u2_m_s (with a warning, see
// warn-zone-climate-old-key), into the same controller value. The
// figures are placeholders of the fixture.
func TestClimateWindKey(t *testing.T) {
	b, err := os.ReadFile(filepath.Join(configDir, "warn-zone-climate-old-key.yaml"))
	require.NoError(t, err)
	old := string(b)
	require.Contains(t, old, "{u2_m_s: 2.5,")
	for name, doc := range map[string]string{
		"old": old,
		"new": strings.Replace(old, "{u2_m_s: 2.5,", "{wind_2m_m_s: 2.5,", 1),
	} {
		c, err := Parse([]byte(doc))
		require.NoError(t, err, name)
		site := &c.Sites[0]
		z, err := site.Zones[0].Controller(&site.Stations[0])
		require.NoError(t, err, name)
		require.NotNil(t, z.Crop.Climate, name)
		assert.Equal(t, 2.5, z.Crop.Climate.U2, name)
		if name == "new" {
			assert.Empty(t, c.Warnings(), name)
		}
	}
}
