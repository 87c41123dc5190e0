package config

import (
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// TestStateTopicBuilders pins the retained state, report and availability
// topics to the forms the README documents.
func TestStateTopicBuilders(t *testing.T) {
	assert.Equal(t, "farm/etpulse/lowfield/mast/state", StationStateTopic("farm/etpulse", "lowfield", "mast"))
	assert.Equal(t, "etpulse/lowfield/zones/block-1/state", ZoneStateTopic("etpulse", "lowfield", "block-1"))
	assert.Equal(t, "etpulse/lowfield/report/daily", ReportTopic("etpulse", "lowfield"))
	assert.Equal(t, "etpulse/gateway/etpulse-lowfield/availability", AvailabilityTopic("etpulse", "etpulse-lowfield"))
}

// TestStateTopicsCollide: a sensor topic equal to one of the gateway's
// retained topics, and a station named after the report subtree, are
// refused at their field paths.
func TestStateTopicsCollide(t *testing.T) {
	base := string(minimalWith(t, "", ""))
	for _, tc := range []struct{ topic, want string }{
		{"etpulse/lowfield/mast/state", "the retained state of sites[0].stations[0]"},
		{"etpulse/lowfield/report/daily", "the daily report of sites[0]"},
		{"etpulse/gateway/etpulse-lowfield/availability", "the gateway's availability"},
	} {
		doc := strings.Replace(base, "topic: lowfield/mast/t,", "topic: "+tc.topic+",", 1)
		_, err := Parse([]byte(doc))
		require.Error(t, err, tc.topic)
		assert.Contains(t, err.Error(), "sites[0].stations[0].sensors[0].topic", tc.topic)
		assert.Contains(t, err.Error(), tc.want, tc.topic)
	}
	doc := strings.Replace(base, "  - id: mast\n", "  - id: report\n", 1)
	_, err := Parse([]byte(doc))
	require.Error(t, err)
	assert.Contains(t, err.Error(), `sites[0].stations[0].id: "report" is reserved`)
}
