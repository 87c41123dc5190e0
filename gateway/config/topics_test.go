package config

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// minimalWith returns testdata/config/minimal.yaml with extra lines before it
// and the broker line replaced by broker.
func minimalWith(t *testing.T, extra, broker string) []byte {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(configDir, "minimal.yaml"))
	require.NoError(t, err)
	s := string(b)
	if broker != "" {
		lines := strings.Split(s, "\n")
		for i, l := range lines {
			if strings.HasPrefix(l, "broker:") {
				lines[i] = broker
			}
		}
		s = strings.Join(lines, "\n")
	}
	return []byte(extra + "\n" + s)
}

func TestTopicPrefixDefault(t *testing.T) {
	c, err := Parse(minimalWith(t, "", "broker: {url: 'tcp://127.0.0.1:1883'}"))
	require.NoError(t, err)
	assert.Equal(t, DefaultTopicPrefix, c.TopicPrefix)
	assert.Equal(t, "etpulse", c.Prefix())
	assert.Equal(t, "etpulse", c.Alerts.TopicPrefix)
	// The default client id is unchanged by the prefix feature, so an existing
	// gateway keeps its persistent session.
	assert.Equal(t, "etpulse-lowfield", c.Broker.ClientID)
}

func TestTopicPrefixSeveralLevels(t *testing.T) {
	c, err := Parse(minimalWith(t, "topic_prefix: kestrel-ridge/irrigation", "broker: {url: 'tcp://127.0.0.1:1883'}"))
	require.NoError(t, err)
	assert.Equal(t, "kestrel-ridge/irrigation", c.Prefix())
	assert.Equal(t, "kestrel-ridge/irrigation", c.Alerts.TopicPrefix, "alerts follow topic_prefix")
	assert.Equal(t, "kestrel-ridge-irrigation-lowfield", c.Broker.ClientID, "client id is per prefix and site")

	z := Zone{ID: "block-1"}
	assert.Equal(t, "kestrel-ridge/irrigation/lowfield/zones/block-1/command", z.CommandTopicIn(c.Prefix(), "lowfield"))
	assert.Equal(t, "kestrel-ridge/irrigation/lowfield/zones/block-1/report", z.ReportTopicIn(c.Prefix(), "lowfield"))
	z.CommandTopic = "valves/v1/run"
	assert.Equal(t, "valves/v1/run", z.CommandTopicIn(c.Prefix(), "lowfield"))
}

func TestTopicPrefixAlertsOwnPrefix(t *testing.T) {
	c, err := Parse(minimalWith(t, "topic_prefix: farm/one\nalerts: {topic_prefix: watch}", ""))
	require.NoError(t, err)
	assert.Equal(t, "farm/one", c.TopicPrefix)
	assert.Equal(t, "watch", c.Alerts.TopicPrefix)
	assert.Equal(t, "etpulse-lowfield", c.Broker.ClientID, "an explicit client id is kept")

	// alerts.topic_prefix set on its own keeps its one-level rule.
	_, err = Parse(minimalWith(t, "alerts: {topic_prefix: a/b}", ""))
	require.Error(t, err)
	assert.Contains(t, err.Error(), `alerts.topic_prefix: must be one MQTT topic level`)
}

func TestClientIDBase(t *testing.T) {
	for in, want := range map[string]string{
		"":               "etpulse",
		"etpulse":        "etpulse",
		"farm/etpulse":   "farm-etpulse",
		"Kestrel Ridge":  "Kestrel-Ridge",
		"lowmead_fields": "lowmead_fields",
		"höhe/1":         "h-he-1",
	} {
		assert.Equal(t, want, clientIDBase(in), "%q", in)
	}
}

// TestTopicsPerSite: two gateway processes that share a broker, each owning
// one site, use disjoint topics and client ids.
func TestTopicsPerSite(t *testing.T) {
	load := func(site string) *Config {
		doc := strings.ReplaceAll(string(minimalWith(t, "", "broker: {url: 'tcp://127.0.0.1:1883'}")), "lowfield", site)
		c, err := Parse([]byte(doc))
		require.NoError(t, err)
		return c
	}
	a, b := load("lowfield"), load("highfield")
	assert.NotEqual(t, a.Broker.ClientID, b.Broker.ClientID)
	z := Zone{ID: "block-1"}
	assert.NotEqual(t, z.CommandTopicIn(a.Prefix(), a.Sites[0].ID), z.CommandTopicIn(b.Prefix(), b.Sites[0].ID))
}

// TestTopicBuilders pins each kind of topic to the form the README documents
// for the valve controllers, dashboards and `etpulse water` that use them.
func TestTopicBuilders(t *testing.T) {
	for _, tc := range []struct{ got, want string }{
		{RecordTopic("farm/etpulse", "lowfield", "mast"), "farm/etpulse/lowfield/mast/hour"},
		{HoldTopic("etpulse", "lowfield"), "etpulse/lowfield/hold"},
		{HoldReplyTopic("etpulse", "lowfield"), "etpulse/lowfield/hold/reply"},
		{WaterTopic("etpulse", "lowfield"), "etpulse/lowfield/water"},
		{WaterReplyTopic("etpulse", "lowfield"), "etpulse/lowfield/water/reply"},
		{ZoneCommandTopic("etpulse", "lowfield", "block-1"), "etpulse/lowfield/zones/block-1/command"},
		{ZoneReportTopic("etpulse", "lowfield", "block-1"), "etpulse/lowfield/zones/block-1/report"},
		{AlertRoot("alarms", "lowfield"), "alarms/lowfield/alerts"},
		{AlertTopic("alarms", "lowfield", "mast", "rh", "rel_humidity", "rh-above-100"), "alarms/lowfield/alerts/mast/rh/rel_humidity/rh-above-100"},
	} {
		assert.Equal(t, tc.want, tc.got)
	}
	z := Zone{ID: "block-1"}
	assert.Equal(t, ZoneCommandTopic("p", "s", "block-1"), z.CommandTopicIn("p", "s"))
	assert.Equal(t, ZoneReportTopic("p", "s", "block-1"), z.ReportTopicIn("p", "s"))
	z.CommandTopic, z.ReportTopic = "valves/v1/in", "valves/v1/out"
	assert.Equal(t, "valves/v1/in", z.CommandTopicIn("p", "s"))
	assert.Equal(t, "valves/v1/out", z.ReportTopicIn("p", "s"))
}

// TestSummaryListsOwnTopics: `etpulse check` shows every kind of topic the
// gateway owns, built by the same functions the gateway uses.
func TestSummaryListsOwnTopics(t *testing.T) {
	c, err := Load(filepath.Join(configDir, "minimal.yaml"))
	require.NoError(t, err)
	var b bytes.Buffer
	require.NoError(t, c.Summary(&b))
	p := c.Prefix()
	for _, want := range []string{
		RecordTopic(p, "<site>", "<station>"),
		ZoneCommandTopic(p, "<site>", "<zone>"),
		HoldTopic(p, "<site>"),
		WaterTopic(p, "<site>"),
		AlertRoot(c.Alerts.TopicPrefix, "<site>") + "/...",
	} {
		assert.Contains(t, b.String(), want)
	}
}
