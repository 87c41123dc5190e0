package mqtt

import (
	"fmt"
	"strings"
)

// MatchTopic reports whether topic matches the subscription filter, with the
// MQTT 3.1.1 wildcards '+' (one level) and '#' (this and all lower levels,
// last only). Topics starting with '$' match no filter starting with a
// wildcard (MQTT 3.1.1 section 4.7.2).
func MatchTopic(filter, topic string) bool {
	if strings.HasPrefix(topic, "$") && (strings.HasPrefix(filter, "+") || strings.HasPrefix(filter, "#")) {
		return false
	}
	fl := strings.Split(filter, "/")
	tl := strings.Split(topic, "/")
	for i, f := range fl {
		if f == "#" {
			return true
		}
		if i >= len(tl) {
			return false
		}
		if f != "+" && f != tl[i] {
			return false
		}
	}
	return len(fl) == len(tl)
}

// ValidFilter checks a subscription filter: not empty, at most 65535 bytes,
// '#' only as the whole last level and '+' only as a whole level
// (MQTT 3.1.1 section 4.7.1).
func ValidFilter(filter string) error {
	if filter == "" || len(filter) > 65535 {
		return fmt.Errorf("invalid topic filter %q: must be 1-65535 bytes", filter)
	}
	if strings.ContainsRune(filter, 0) {
		return fmt.Errorf("invalid topic filter %q: contains NUL", filter)
	}
	levels := strings.Split(filter, "/")
	for i, l := range levels {
		if strings.Contains(l, "#") && (l != "#" || i != len(levels)-1) {
			return fmt.Errorf("invalid topic filter %q: '#' must be the whole last level", filter)
		}
		if strings.Contains(l, "+") && l != "+" {
			return fmt.Errorf("invalid topic filter %q: '+' must be a whole level", filter)
		}
	}
	return nil
}
