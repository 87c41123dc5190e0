package config

import (
	"fmt"
	"strings"
)

// DefaultTopicPrefix is the default of topic_prefix: the first level of every
// topic the gateway itself publishes or owns (hourly records, alerts, zone
// commands and reports, holds).
const DefaultTopicPrefix = "etpulse"

// maxTopicPrefixLen bounds topic_prefix; the longest topic built on it must
// stay well inside MQTT's 65535 bytes.
const maxTopicPrefixLen = 1024

// The topics the gateway publishes or subscribes for itself. Each kind is
// built by one function below, used both by the collision checks of
// validateOwnTopics and by the code that publishes or subscribes, so the two
// cannot drift apart. prefix is topic_prefix (alerts.topic_prefix for alert
// topics); site, station and zone are configured ids.

// RecordTopic is the topic of a station's hourly records:
// <prefix>/<site>/<station>/hour.
func RecordTopic(prefix, site, station string) string {
	return prefix + "/" + site + "/" + station + "/hour"
}

// HoldTopic is the topic of a site's hold requests: <prefix>/<site>/hold.
func HoldTopic(prefix, site string) string { return prefix + "/" + site + "/hold" }

// HoldReplyTopic is the topic of the answers to a site's hold requests:
// <prefix>/<site>/hold/reply.
func HoldReplyTopic(prefix, site string) string { return HoldTopic(prefix, site) + "/reply" }

// WaterTopic is the topic of a site's water requests (water applied without
// a command): <prefix>/<site>/water.
func WaterTopic(prefix, site string) string { return prefix + "/" + site + "/water" }

// WaterReplyTopic is the topic of the answers to a site's water requests:
// <prefix>/<site>/water/reply.
func WaterReplyTopic(prefix, site string) string { return WaterTopic(prefix, site) + "/reply" }

// ZoneCommandTopic is the default command topic of a zone (when
// command_topic is not set): <prefix>/<site>/zones/<zone>/command.
func ZoneCommandTopic(prefix, site, zone string) string {
	return prefix + "/" + site + "/zones/" + zone + "/command"
}

// ZoneReportTopic is the default report topic of a zone (when report_topic
// is not set): <prefix>/<site>/zones/<zone>/report.
func ZoneReportTopic(prefix, site, zone string) string {
	return prefix + "/" + site + "/zones/" + zone + "/report"
}

// AlertRoot is the topic level under which a site's retained alerts are
// published: <prefix>/<site>/alerts (prefix is alerts.topic_prefix).
func AlertRoot(prefix, site string) string { return prefix + "/" + site + "/alerts" }

// AlertTopic is the retained topic of one alert:
// <prefix>/<site>/alerts/<station>/<sensor>/<quantity>/<kind>.
func AlertTopic(prefix, site, station, sensor, quantity, kind string) string {
	return strings.Join([]string{AlertRoot(prefix, site), station, sensor, quantity, kind}, "/")
}

// StationStateTopic is the retained topic of a station's state (a summary
// of its last hourly record): <prefix>/<site>/<station>/state.
func StationStateTopic(prefix, site, station string) string {
	return prefix + "/" + site + "/" + station + "/state"
}

// ZoneStateTopic is the retained topic of a zone's state (depletion, RAW,
// TAW, hold, next run): <prefix>/<site>/zones/<zone>/state.
func ZoneStateTopic(prefix, site, zone string) string {
	return prefix + "/" + site + "/zones/" + zone + "/state"
}

// ReportTopic is the retained topic of a site's daily report:
// <prefix>/<site>/report/daily.
func ReportTopic(prefix, site string) string { return prefix + "/" + site + "/report/daily" }

// AvailabilityTopic is the retained topic on which a gateway says "online"
// after it connects and the broker says "offline" (its last will) when the
// connection dies: <prefix>/gateway/<client id>/availability.
func AvailabilityTopic(prefix, clientID string) string {
	return prefix + "/gateway/" + clientID + "/availability"
}

// Station ids that cannot be used: the topic <prefix>/<site>/<id>/... of such
// a station would lie inside a subtree the gateway publishes to or listens on.
var reservedStationIDs = map[string]string{
	"alerts": "alert topics",
	"zones":  "zone command and report topics",
	"hold":   "hold topics",
	"water":  "water request topics",
	"report": "the daily report topic",
	// Not a topic subtree, but the station of gateway-wide alerts.
	"gateway": "alerts about the gateway itself (store outbox)",
}

// Prefix returns the topic prefix: topic_prefix, or DefaultTopicPrefix for a
// configuration built in code that left it empty.
func (c *Config) Prefix() string {
	if c.TopicPrefix == "" {
		return DefaultTopicPrefix
	}
	return c.TopicPrefix
}

// topicPrefixProblem explains why s is not a usable topic prefix, or returns "".
// A prefix follows the rules of an exact topic, and its levels are not empty.
func topicPrefixProblem(s string) string {
	if msg := topicProblem(s); msg != "" {
		return msg
	}
	switch {
	case len(s) > maxTopicPrefixLen:
		return fmt.Sprintf("must be at most %d bytes", maxTopicPrefixLen)
	case strings.HasPrefix(s, "/") || strings.HasSuffix(s, "/"):
		return "must not start or end with '/'"
	case strings.Contains(s, "//"):
		return "must not have empty topic levels ('//')"
	}
	return ""
}

// clientIDBase turns a topic prefix into the start of a default MQTT client
// id: every character outside a-z, A-Z, 0-9, '-' and '_' becomes '-'. The
// default prefix gives "etpulse", so the default client id of a gateway that
// keeps it does not change (the broker keeps the persistent session under it).
func clientIDBase(prefix string) string {
	if prefix == "" {
		prefix = DefaultTopicPrefix
	}
	return strings.Map(func(r rune) rune {
		if r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || r == '-' || r == '_' {
			return r
		}
		return '-'
	}, prefix)
}

// validateOwnTopics checks that the topics the gateway publishes or
// subscribes for itself (hourly records, holds, zone commands and reports,
// alerts) neither collide with each other nor with a sensor topic, so that
// several gateway processes, each owning its sites, can share one broker.
func validateOwnTopics(c *Config, p *Problems) {
	prefix := c.Prefix()
	alertPrefix := c.Alerts.TopicPrefix
	if alertPrefix == "" {
		alertPrefix = prefix
	}
	owner := map[string]string{} // topic -> what the gateway uses it for
	owner[AvailabilityTopic(prefix, c.Broker.ClientID)] = "the gateway's availability (online, or its last will offline)"
	for i := range c.Sites {
		s := &c.Sites[i]
		if !validID(s.ID) {
			continue // reported by the site checks
		}
		for j := range s.Stations {
			st := &s.Stations[j]
			if what, ok := reservedStationIDs[st.ID]; ok {
				p.Addf(fmt.Sprintf("sites[%d].stations[%d].id", i, j),
					"%q is reserved: %s/%s/%s/... holds the gateway's %s", st.ID, prefix, s.ID, st.ID, what)
				continue
			}
			owner[RecordTopic(prefix, s.ID, st.ID)] = fmt.Sprintf("the hourly records of sites[%d].stations[%d]", i, j)
			owner[StationStateTopic(prefix, s.ID, st.ID)] = fmt.Sprintf("the retained state of sites[%d].stations[%d]", i, j)
		}
		owner[ReportTopic(prefix, s.ID)] = fmt.Sprintf("the daily report of sites[%d]", i)
		for j := range s.Zones {
			owner[ZoneStateTopic(prefix, s.ID, s.Zones[j].ID)] = fmt.Sprintf("the retained state of sites[%d].zones[%d]", i, j)
		}
		if len(s.Zones) > 0 {
			owner[HoldTopic(prefix, s.ID)] = fmt.Sprintf("the hold requests of sites[%d]", i)
			owner[HoldReplyTopic(prefix, s.ID)] = fmt.Sprintf("the hold replies of sites[%d]", i)
			owner[WaterTopic(prefix, s.ID)] = fmt.Sprintf("the water requests of sites[%d]", i)
			owner[WaterReplyTopic(prefix, s.ID)] = fmt.Sprintf("the water replies of sites[%d]", i)
			owner[ForecastTopic(prefix, s.ID)] = fmt.Sprintf("the forecast of sites[%d]", i)
		}
		for j := range s.Meters {
			owner[MeterTopic(prefix, s.ID, s.Meters[j].ID)] = fmt.Sprintf("the readings of sites[%d].meters[%d]", i, j)
		}
	}
	for i := range c.Sites {
		s := &c.Sites[i]
		for j := range s.Zones {
			z := &s.Zones[j]
			zp := fmt.Sprintf("sites[%d].zones[%d]", i, j)
			for _, t := range []struct{ field, topic string }{
				{"command_topic", z.CommandTopicIn(prefix, s.ID)},
				{"report_topic", z.ReportTopicIn(prefix, s.ID)},
			} {
				if topicProblem(t.topic) != "" {
					continue // reported by the zone checks
				}
				if first, ok := owner[t.topic]; ok {
					p.Addf(zp+"."+t.field, "topic %q is already used for %s", t.topic, first)
					continue
				}
				owner[t.topic] = zp + "." + t.field
			}
		}
	}
	for i := range c.Sites {
		s := &c.Sites[i]
		for j := range s.Stations {
			for k, sn := range s.Stations[j].Sensors {
				path := fmt.Sprintf("sites[%d].stations[%d].sensors[%d].topic", i, j, k)
				if first, ok := owner[sn.Topic]; ok {
					p.Addf(path, "topic %q is the gateway's own topic for %s", sn.Topic, first)
					continue
				}
				for _, site := range c.Sites {
					if root := AlertRoot(alertPrefix, site.ID) + "/"; site.ID != "" && strings.HasPrefix(sn.Topic, root) {
						p.Addf(path, "topic %q lies under %s, where the gateway publishes its alerts", sn.Topic, root)
						break
					}
				}
			}
		}
	}
}
