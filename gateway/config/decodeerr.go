package config

import (
	"fmt"
	"math"
	"reflect"
	"regexp"
	"strconv"
	"strings"
	"sync"

	"go.yaml.in/yaml/v3"
)

// Decoding errors name the field like validation errors do
// ("sites[0].stations[0].late_window: invalid duration ..."). The YAML
// decoder only knows lines, so a failed decode is explained by parsing the
// document again into nodes and finding the key or value each message is
// about.

// valueError reports a bad value at node n from an UnmarshalYAML method. It
// is a *yaml.TypeError, so the decoder goes on and collects every problem;
// the line and column let decodeError find the field's path.
func valueError(n *yaml.Node, format string, args ...any) error {
	return &yaml.TypeError{Errors: []string{
		fmt.Sprintf("line %d column %d: %s", n.Line, n.Column, fmt.Sprintf(format, args...)),
	}}
}

// kindName describes a node's kind for messages ("a list").
func kindName(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	case yaml.AliasNode:
		return "an alias"
	}
	return fmt.Sprintf("%q", n.Value)
}

// located is a key or value node of the document and the field path it
// stands for.
type located struct {
	path  string
	node  *yaml.Node
	isKey bool
}

func indexNodes(n *yaml.Node, path string, out *[]located) {
	switch n.Kind {
	case yaml.DocumentNode:
		for _, c := range n.Content {
			indexNodes(c, path, out)
		}
	case yaml.MappingNode:
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, v := n.Content[i], n.Content[i+1]
			p := k.Value
			if path != "" {
				p = path + "." + k.Value
			}
			*out = append(*out, located{path: p, node: k, isKey: true}, located{path: p, node: v})
			indexNodes(v, p, out)
		}
	case yaml.SequenceNode:
		for i, c := range n.Content {
			p := fmt.Sprintf("%s[%d]", path, i)
			*out = append(*out, located{path: p, node: c})
			indexNodes(c, p, out)
		}
	}
}

var (
	reLocated     = regexp.MustCompile(`^line (\d+)(?: column (\d+))?: (.*)$`)
	reCannot      = regexp.MustCompile("^cannot unmarshal (!!\\w+)(?: `(.*)`)? into (.+)$")
	reUnknownKey  = regexp.MustCompile(`^field (\S+) not found in type (\S+)$`)
	reSetTwice    = regexp.MustCompile(`^field (\S+) already set in type \S+$`)
	reDuplicateKy = regexp.MustCompile(`^mapping key "(.*)" already defined at line (\d+)$`)
)

// decodeError turns the decoder's error into a *ValidationError whose
// problems name the field path, e.g.
// "sites[0].stations[0].close_grace: invalid duration "5 minutes": ... (line 16)".
// A message it cannot place keeps its line number; a syntax error is
// returned as it is.
func decodeError(doc []byte, err error) error {
	te, ok := err.(*yaml.TypeError)
	if !ok {
		return fmt.Errorf("parse config: %w", err)
	}
	var root yaml.Node
	if yaml.Unmarshal(doc, &root) != nil {
		return fmt.Errorf("parse config: %w", err)
	}
	var nodes []located
	indexNodes(&root, "", &nodes)
	var p Problems
	for _, msg := range te.Errors {
		path, text, line := placeMessage(nodes, msg)
		if path == "" {
			p.list = append(p.list, msg)
			continue
		}
		p.Addf(path, "%s (line %d)", text, line)
	}
	return p.Err()
}

// placeMessage finds the field a decoder message is about; path is "" when
// it cannot.
func placeMessage(nodes []located, msg string) (path, text string, line int) {
	m := reLocated.FindStringSubmatch(msg)
	if m == nil {
		return "", "", 0
	}
	line, _ = strconv.Atoi(m[1])
	text = m[3]
	if m[2] != "" { // from valueError: exact position
		col, _ := strconv.Atoi(m[2])
		for _, l := range nodes {
			if l.node.Line == line && l.node.Column == col {
				return l.path, text, line
			}
		}
		return "", "", 0
	}
	find := func(match func(located) bool) string {
		for _, l := range nodes {
			if l.node.Line == line && match(l) {
				return l.path
			}
		}
		return ""
	}
	switch {
	case reCannot.MatchString(text):
		c := reCannot.FindStringSubmatch(text)
		tag, shown, into := c[1], c[2], c[3]
		var got *yaml.Node
		path = find(func(l located) bool {
			n := l.node
			if l.isKey {
				return false
			}
			switch tag {
			case "!!seq":
				return n.Kind == yaml.SequenceNode
			case "!!map":
				return n.Kind == yaml.MappingNode
			}
			if n.Kind != yaml.ScalarNode {
				return false
			}
			if v, cut := strings.CutSuffix(shown, "..."); cut {
				return strings.HasPrefix(n.Value, v)
			}
			return n.Value == shown
		})
		if path == "" {
			return "", "", 0
		}
		for _, l := range nodes {
			if l.path == path && !l.isKey {
				got = l.node
				break
			}
		}
		return path, fmt.Sprintf("must be %s, got %s", wantedKind(into), kindName(got)), line
	case reUnknownKey.MatchString(text):
		c := reUnknownKey.FindStringSubmatch(text)
		path = find(func(l located) bool { return l.isKey && l.node.Value == c[1] })
		text = "unknown key"
		if near := nearestKey(c[1], c[2]); near != "" {
			text += fmt.Sprintf(", did you mean %q?", near)
		}
		return path, text, line
	case reSetTwice.MatchString(text):
		name := reSetTwice.FindStringSubmatch(text)[1]
		path = find(func(l located) bool { return l.isKey && l.node.Value == name })
		return path, "set twice", line
	case reDuplicateKy.MatchString(text):
		c := reDuplicateKy.FindStringSubmatch(text)
		path = find(func(l located) bool { return l.isKey && l.node.Value == c[1] })
		return path, "duplicate key, first at line " + c[2], line
	}
	return "", "", 0
}

// wantedKind describes the Go type a value was decoded into, by its name as
// the decoder prints it ("float64", "[]config.Sensor", "hourly.Quantity").
func wantedKind(goType string) string {
	t, ok := configTypes()[goType]
	if !ok {
		return "a " + goType
	}
	switch t.Kind() {
	case reflect.Slice, reflect.Array:
		return "a list"
	case reflect.Map, reflect.Struct:
		return "a mapping"
	case reflect.Float32, reflect.Float64:
		return "a number"
	case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64,
		reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		return "a whole number"
	case reflect.Bool:
		return "true or false"
	case reflect.String:
		return "text"
	}
	return "a " + goType
}

// nearestKey returns the YAML key of struct type goType closest to name,
// when it is a likely typo (at most two edits), or "".
func nearestKey(name, goType string) string {
	t, ok := configTypes()[goType]
	if !ok || t.Kind() != reflect.Struct {
		return ""
	}
	best, bestD := "", 3
	for i := range t.NumField() {
		key, _, _ := strings.Cut(t.Field(i).Tag.Get("yaml"), ",")
		if key == "" || key == "-" {
			continue
		}
		if d := editDistance(name, key); d < bestD {
			best, bestD = key, d
		}
	}
	return best
}

// editDistance is the Levenshtein distance of a and b (bytes).
func editDistance(a, b string) int {
	prev := make([]int, len(b)+1)
	cur := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(b)]
}

// configTypes maps the name of every type reachable from Config, as the
// decoder prints it, to the type.
var configTypes = sync.OnceValue(func() map[string]reflect.Type {
	types := map[string]reflect.Type{}
	var walk func(t reflect.Type)
	walk = func(t reflect.Type) {
		if _, seen := types[t.String()]; seen {
			return
		}
		types[t.String()] = t
		switch t.Kind() {
		case reflect.Pointer, reflect.Slice, reflect.Array:
			walk(t.Elem())
		case reflect.Map:
			walk(t.Key())
			walk(t.Elem())
		case reflect.Struct:
			for i := range t.NumField() {
				if t.Field(i).IsExported() {
					walk(t.Field(i).Type)
				}
			}
		}
	}
	walk(reflect.TypeOf(Config{}))
	return types
})

// fractionProblems finds fractional numbers written for whole-number
// settings, which the YAML decoder would silently truncate (max_minutes: 2.5
// would become 2). It walks the document alongside the Config type.
func fractionProblems(doc []byte) error {
	var root yaml.Node
	if yaml.Unmarshal(doc, &root) != nil || len(root.Content) == 0 {
		return nil
	}
	var p Problems
	walkWhole(root.Content[0], reflect.TypeOf(Config{}), "", &p)
	return p.Err()
}

var unmarshalerType = reflect.TypeOf((*yaml.Unmarshaler)(nil)).Elem()

func walkWhole(n *yaml.Node, t reflect.Type, path string, p *Problems) {
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	if reflect.PointerTo(t).Implements(unmarshalerType) {
		return // decodes itself (Duration, Secret) and reports its own errors
	}
	switch t.Kind() {
	case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64,
		reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		if n.Kind == yaml.ScalarNode && n.ShortTag() == "!!float" {
			if v, err := strconv.ParseFloat(n.Value, 64); err != nil || v != math.Trunc(v) {
				p.Addf(path, "must be a whole number, got %s (line %d)", n.Value, n.Line)
			}
		}
	case reflect.Struct:
		if n.Kind != yaml.MappingNode {
			return
		}
		fields := map[string]reflect.Type{}
		for i := range t.NumField() {
			if key, _, _ := strings.Cut(t.Field(i).Tag.Get("yaml"), ","); key != "" && key != "-" && t.Field(i).IsExported() {
				fields[key] = t.Field(i).Type
			}
		}
		for i := 0; i+1 < len(n.Content); i += 2 {
			if ft, ok := fields[n.Content[i].Value]; ok {
				walkWhole(n.Content[i+1], ft, joinPath(path, n.Content[i].Value), p)
			}
		}
	case reflect.Map:
		if n.Kind != yaml.MappingNode {
			return
		}
		for i := 0; i+1 < len(n.Content); i += 2 {
			walkWhole(n.Content[i+1], t.Elem(), joinPath(path, n.Content[i].Value), p)
		}
	case reflect.Slice, reflect.Array:
		if n.Kind != yaml.SequenceNode {
			return
		}
		for i, c := range n.Content {
			walkWhole(c, t.Elem(), fmt.Sprintf("%s[%d]", path, i), p)
		}
	}
}

func joinPath(path, key string) string {
	if path == "" {
		return key
	}
	return path + "." + key
}
