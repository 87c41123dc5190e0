package mqtt

import "strings"

// routes finds the subscription of a received topic without visiting every
// subscription: filters without wildcards are keys of a map, wildcard
// filters are paths in a trie of topic levels. A lookup costs one map
// probe plus one trie walk whose length is bounded by the topic's levels
// and the wildcard filters that share its prefix, whatever the number of
// subscriptions; it allocates nothing.
//
// When several filters match a topic, the one subscribed first wins (its
// position in subscription order is the value stored), as with the linear
// scan this replaces.
type routes struct {
	exact map[string]int // filter without wildcards -> subscription position
	wild  *routeNode     // nil until a wildcard filter is added
}

// routeNode is one level of the wildcard trie.
type routeNode struct {
	children map[string]*routeNode // literal next levels
	plus     *routeNode            // '+' as the next level
	hash     int                   // position of the filter ending in '#' here, or -1
	end      int                   // position of the filter ending exactly here, or -1
}

func newRouteNode() *routeNode { return &routeNode{hash: -1, end: -1} }

// add records filter (valid, see ValidFilter) at subscription position pos.
func (r *routes) add(filter string, pos int) {
	if !strings.ContainsAny(filter, "+#") {
		if r.exact == nil {
			r.exact = map[string]int{}
		}
		r.exact[filter] = pos
		return
	}
	if r.wild == nil {
		r.wild = newRouteNode()
	}
	n := r.wild
	for rest, more := filter, true; more; {
		var level string
		level, rest, more = strings.Cut(rest, "/")
		switch level {
		case "#":
			n.hash = pos // '#' is always the last level
			return
		case "+":
			if n.plus == nil {
				n.plus = newRouteNode()
			}
			n = n.plus
		default:
			if n.children == nil {
				n.children = map[string]*routeNode{}
			}
			c := n.children[level]
			if c == nil {
				c = newRouteNode()
				n.children[level] = c
			}
			n = c
		}
	}
	n.end = pos
}

// lookup returns the lowest subscription position whose filter matches
// topic, or -1.
func (r *routes) lookup(topic string) int {
	best := -1
	if pos, ok := r.exact[topic]; ok {
		best = pos
	}
	if r.wild != nil {
		// MQTT 3.1.1 section 4.7.2: a topic starting with '$' matches no
		// filter starting with a wildcard.
		r.wild.match(topic, true, true, strings.HasPrefix(topic, "$"), &best)
	}
	return best
}

// match walks the levels of rest (more: rest still holds a level) below n.
func (n *routeNode) match(rest string, more, root, dollar bool, best *int) {
	keep := func(pos int) {
		if pos >= 0 && (*best < 0 || pos < *best) {
			*best = pos
		}
	}
	wildOK := !(root && dollar)
	if wildOK {
		keep(n.hash) // '#' also matches the parent level (MQTT 3.1.1 section 4.7.1.2)
	}
	if !more {
		keep(n.end)
		return
	}
	level, next, nextMore := strings.Cut(rest, "/")
	if c := n.children[level]; c != nil {
		c.match(next, nextMore, false, dollar, best)
	}
	if n.plus != nil && wildOK {
		n.plus.match(next, nextMore, false, dollar, best)
	}
}
