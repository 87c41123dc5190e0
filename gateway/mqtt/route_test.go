package mqtt

import (
	"fmt"
	"math/rand/v2"
	"strings"
	"testing"
)

// newRoutingClient is a Client that is not connected, for routing tests.
func newRoutingClient() *Client {
	return &Client{subs: map[string]subscription{}}
}

// subscribeAll subscribes filters in order; each handler records its index
// in *got, so a test can tell which subscription a topic reached.
func subscribeAll(c *Client, filters []string, got *int) {
	for i, f := range filters {
		c.register(f, 1, func(Message) { *got = i })
	}
}

// firstMatch is the routing rule written out the slow way: the first
// subscription, in subscription order, whose filter matches.
func firstMatch(filters []string, topic string) int {
	for i, f := range filters {
		if MatchTopic(f, topic) {
			return i
		}
	}
	return -1
}

func routedTo(c *Client, topic string, got *int) int {
	*got = -1
	if h := c.match(topic); h != nil {
		h(Message{Topic: topic})
	}
	return *got
}

// The dispatcher must agree with MatchTopic and with subscription order
// (the first subscribed of several matching filters gets the message),
// including '$' topics that no leading wildcard matches (MQTT 3.1.1
// section 4.7.2).
func TestMatchAgreesWithMatchTopic(t *testing.T) {
	levels := []string{"a", "b", "c", "$sys", ""}
	rnd := rand.New(rand.NewPCG(1, 2))
	pick := func(wild bool) string {
		n := 1 + rnd.IntN(4)
		parts := make([]string, n)
		for i := range parts {
			parts[i] = levels[rnd.IntN(len(levels))]
			if wild && rnd.IntN(4) == 0 {
				parts[i] = "+"
			}
		}
		if wild && rnd.IntN(4) == 0 {
			parts[n-1] = "#"
		}
		return strings.Join(parts, "/")
	}
	for round := 0; round < 200; round++ {
		var filters []string
		seen := map[string]bool{}
		for len(filters) < 12 {
			f := pick(true)
			if !seen[f] && ValidFilter(f) == nil {
				seen[f] = true
				filters = append(filters, f)
			}
		}
		c := newRoutingClient()
		var got int
		subscribeAll(c, filters, &got)
		for i := 0; i < 50; i++ {
			topic := pick(false)
			if want := firstMatch(filters, topic); routedTo(c, topic, &got) != want {
				t.Fatalf("topic %q with filters %q: routed to %d, want %d", topic, filters, got, want)
			}
		}
	}
}

func TestMatchOrderAndDollarTopics(t *testing.T) {
	c := newRoutingClient()
	var got int
	filters := []string{"farm/+/temp", "#", "farm/north/temp", "$SYS/#", "+/north/#"}
	subscribeAll(c, filters, &got)
	for topic, want := range map[string]int{
		"farm/north/temp":   0, // three filters match: the first subscribed wins
		"farm/north/rh":     1,
		"farm":              1,
		"$SYS/broker/load":  3, // '#' and '+/...' do not match '$' topics
		"$SYS":              3, // '#' matches its parent level
		"$other/north/temp": -1,
	} {
		if r := routedTo(c, topic, &got); r != want {
			t.Errorf("%q routed to %d, want %d", topic, r, want)
		}
	}
}

// Routing a message must not grow with the number of subscriptions: with
// 5,000 exact topics and a few wildcard filters, finding the handler
// allocates nothing (the old loop split both strings for every filter).
func TestMatchCostIndependentOfSubscriptions(t *testing.T) {
	c := newRoutingClient()
	var filters []string
	for i := 0; i < 5000; i++ {
		filters = append(filters, fmt.Sprintf("farm/st%04d/sensor", i))
	}
	filters = append(filters, "alerts/+/ack", "control/#")
	var got int
	subscribeAll(c, filters, &got)
	for _, topic := range []string{"farm/st4999/sensor", "alerts/zone7/ack", "control/a/b", "nowhere/x"} {
		want := firstMatch(filters, topic)
		if r := routedTo(c, topic, &got); r != want {
			t.Fatalf("%q routed to %d, want %d", topic, r, want)
		}
		if n := testing.AllocsPerRun(100, func() { c.match(topic) }); n != 0 {
			t.Errorf("match(%q) with %d subscriptions: %.0f allocations, want 0", topic, len(filters), n)
		}
	}
}

// BenchmarkDispatchMatch finds the handler of one message among n exact
// subscriptions and two wildcard filters.
func BenchmarkDispatchMatch(b *testing.B) {
	for _, n := range []int{20, 1000, 5000, 30000} {
		b.Run(fmt.Sprintf("subs=%d", n), func(b *testing.B) {
			c := newRoutingClient()
			for i := 0; i < n; i++ {
				c.register(fmt.Sprintf("farm/st%05d/sensor", i), 1, func(Message) {})
			}
			c.register("alerts/+/ack", 1, func(Message) {})
			c.register("control/#", 1, func(Message) {})
			topic := fmt.Sprintf("farm/st%05d/sensor", n-1)
			b.ReportAllocs()
			for b.Loop() {
				if c.match(topic) == nil {
					b.Fatal("no handler")
				}
			}
		})
	}
}
