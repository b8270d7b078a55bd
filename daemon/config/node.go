package config

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	"gopkg.in/yaml.v3"
)

// decoder walks a yaml.Node tree, filling a Config and collecting every
// problem with its line and field path.
type decoder struct {
	file   string
	errs   Errors
	lines  map[string]int  // field path -> line where it is written
	failed map[string]bool // paths with a problem, and all their ancestors
	work   int             // mapping entries and list items visited, bounded by maxWork
	c2     float64         // the configuration's second radiation constant, m·K
}

// maxWork bounds the entries and items the decoder visits. Aliases let a
// small file name the same large list many times over; a real
// configuration visits a few thousand.
const maxWork = 100000

// spend accounts for n visited entries or items; it reports, once, when
// the budget runs out, and from then on the decoder looks no further.
func (d *decoder) spend(n, line int, path string) bool {
	if d.work > maxWork {
		return false
	}
	d.work += n
	if d.work > maxWork {
		d.errorAt(line, path, "aliases expand to more than %d entries", maxWork)
		return false
	}
	return true
}

func newDecoder(file string) *decoder {
	return &decoder{file: file, lines: map[string]int{}, failed: map[string]bool{}}
}

// val is what was found at a field path.
type val struct {
	n    *yaml.Node // aliases followed; nil when absent or null
	path string
	line int // the line of the key (or list item) that names path
}

func (d *decoder) errorAt(line int, path, format string, args ...any) {
	d.errs = append(d.errs, &Error{File: d.file, Line: line, Path: path, Msg: fmt.Sprintf(format, args...)})
	for p := path; ; p = parent(p) {
		d.failed[p] = true
		if p == "" {
			break
		}
	}
}

func (d *decoder) errorf(v val, format string, args ...any) {
	d.errorAt(v.line, v.path, format, args...)
}

// line is where path is written, or its nearest written ancestor.
func (d *decoder) line(path string) int {
	for p := path; ; p = parent(p) {
		if l, ok := d.lines[p]; ok {
			return l
		}
		if p == "" {
			return 0
		}
	}
}

func (d *decoder) sorted() Errors {
	sort.SliceStable(d.errs, func(i, j int) bool { return d.errs[i].Line < d.errs[j].Line })
	return d.errs
}

// join appends a key to a field path.
func join(path, key string) string {
	if path == "" {
		return key
	}
	return path + "." + key
}

// index appends a list index to a field path.
func index(path string, i int) string { return path + "[" + strconv.Itoa(i) + "]" }

// parent strips the last key or index from a field path.
func parent(path string) string {
	i := strings.LastIndexAny(path, ".[")
	if i < 0 {
		return ""
	}
	return path[:i]
}

// yamlLine matches the position yaml.v3 puts in its syntax errors.
var yamlLine = regexp.MustCompile(`(?s)^yaml: line (\d+): (.*)$`)

// document decodes data into its root node. It reports syntax errors, an
// empty file and a second document.
func (d *decoder) document(data []byte) (root val, ok bool) {
	defer func() {
		// yaml.v3 turns its own failures into errors; this is the last
		// guard that bad input never takes the caller down.
		if r := recover(); r != nil {
			d.errorAt(0, "", "YAML parser failure: %v", r)
			ok = false
		}
	}()
	dec := yaml.NewDecoder(bytes.NewReader(data))
	var doc yaml.Node
	if err := dec.Decode(&doc); err != nil {
		if errors.Is(err, io.EOF) {
			d.errorAt(0, "", "empty configuration (want a mapping with gateway, mqtt, endpoints and heads)")
		} else {
			d.yamlError(err)
		}
		return val{}, false
	}
	// A trailing "---" opens an empty document, which is harmless.
	for {
		var next yaml.Node
		err := dec.Decode(&next)
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			d.yamlError(err)
			return val{}, false
		}
		if len(next.Content) > 0 && resolve(next.Content[0]) != nil {
			d.errorAt(next.Line, "", "a second YAML document (want exactly one)")
			return val{}, false
		}
	}
	n := &doc
	if n.Kind == yaml.DocumentNode {
		if len(n.Content) == 0 {
			d.errorAt(0, "", "empty configuration (want a mapping with gateway, mqtt, endpoints and heads)")
			return val{}, false
		}
		n = n.Content[0]
	}
	line := n.Line
	n = resolve(n)
	if n == nil {
		d.errorAt(0, "", "empty configuration (want a mapping with gateway, mqtt, endpoints and heads)")
		return val{}, false
	}
	if n.Kind != yaml.MappingNode {
		d.errorAt(line, "", "want a mapping with gateway, mqtt, endpoints and heads at the top, not %s", describe(n))
		return val{}, false
	}
	d.lines[""] = line
	return val{n: n, line: line}, true
}

func (d *decoder) yamlError(err error) {
	msg := err.Error()
	if m := yamlLine.FindStringSubmatch(msg); m != nil {
		if line, err := strconv.Atoi(m[1]); err == nil {
			d.errorAt(line, "", "YAML syntax error: %s", m[2])
			return
		}
	}
	d.errorAt(0, "", "YAML error: %s", strings.TrimPrefix(msg, "yaml: "))
}

// resolve follows aliases and turns null into nil.
func resolve(n *yaml.Node) *yaml.Node {
	for range 64 {
		if n == nil || n.Kind != yaml.AliasNode {
			break
		}
		n = n.Alias
	}
	if n == nil || n.Kind == yaml.AliasNode || n.Kind == 0 {
		return nil
	}
	if n.Kind == yaml.ScalarNode && n.ShortTag() == "!!null" {
		return nil
	}
	return n
}

// describe names the kind of a node for messages: "a mapping", "a list",
// "the string \"x\"".
func describe(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	case yaml.ScalarNode:
		v := n.Value
		if len(v) > 40 {
			v = v[:37] + "..."
		}
		switch n.ShortTag() {
		case "!!str":
			return fmt.Sprintf("the string %q", v)
		case "!!int", "!!float":
			return "the number " + v
		case "!!bool":
			return "the boolean " + v
		}
		return fmt.Sprintf("%s %q", n.ShortTag(), v)
	}
	return "an unknown YAML node"
}

// entry is one key of a mapping, with merge keys (<<) expanded.
type entry struct {
	key  string
	line int
	val  *yaml.Node
}

// entries lists a mapping's keys in order, reporting duplicate keys and
// expanding merge keys: keys written in the mapping win over merged ones,
// and earlier merged mappings win over later ones. merged holds the
// mappings already expanded into the one being listed: merging one twice
// adds nothing, and a mapping that merges itself stops there.
func (d *decoder) entries(n *yaml.Node, path string, merged map[*yaml.Node]bool) []entry {
	merged[n] = true
	var own []entry
	var merges []*yaml.Node
	var mergeLines []int
	seen := map[string]int{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i], n.Content[i+1]
		kr := resolve(k)
		if kr == nil || kr.Kind != yaml.ScalarNode {
			d.errorAt(k.Line, path, "a mapping key must be a plain word")
			continue
		}
		if kr.ShortTag() == "!!merge" {
			merges = append(merges, v)
			mergeLines = append(mergeLines, k.Line)
			continue
		}
		key := kr.Value
		if first, dup := seen[key]; dup {
			d.errorAt(k.Line, join(path, key), "duplicate key (first at line %d)", first)
			continue
		}
		seen[key] = k.Line
		own = append(own, entry{key: key, line: k.Line, val: v})
	}
	for i, m := range merges {
		var sources []*yaml.Node
		switch r := resolve(m); {
		case r != nil && r.Kind == yaml.MappingNode:
			sources = append(sources, r)
		case r != nil && r.Kind == yaml.SequenceNode:
			for _, it := range r.Content {
				sources = append(sources, resolve(it))
			}
		default:
			sources = append(sources, nil)
		}
		for _, src := range sources {
			if src == nil || src.Kind != yaml.MappingNode {
				d.errorAt(mergeLines[i], path, "a merge key (<<) wants a mapping or a list of mappings")
				continue
			}
			if merged[src] {
				continue
			}
			for _, e := range d.entries(src, path, merged) {
				if _, dup := seen[e.key]; !dup {
					seen[e.key] = e.line
					own = append(own, e)
				}
			}
		}
	}
	return own
}

// fields is a decoded mapping with only known keys.
type fields struct {
	d    *decoder
	v    val
	ok   bool // v is a mapping: its missing keys can be reported
	vals map[string]val
}

// fields checks that v is a mapping of known keys and indexes its values.
// An absent v gives an empty set of fields.
func (d *decoder) fields(v val, known ...string) *fields {
	f := &fields{d: d, v: v, vals: map[string]val{}}
	if v.n == nil {
		return f
	}
	if v.n.Kind != yaml.MappingNode {
		d.errorf(v, "want a mapping, not %s", describe(v.n))
		return f
	}
	if !d.spend(len(v.n.Content)/2, v.line, v.path) {
		return f
	}
	f.ok = true
	for _, e := range d.entries(v.n, v.path, map[*yaml.Node]bool{}) {
		p := join(v.path, e.key)
		if !slices.Contains(known, e.key) {
			d.errorAt(e.line, p, "%s", unknownKey(e.key, known))
			continue
		}
		d.lines[p] = e.line
		f.vals[e.key] = val{n: resolve(e.val), path: p, line: e.line}
	}
	return f
}

// get returns the value of key; an absent key gives a val with a nil node
// placed at the mapping's line.
func (f *fields) get(key string) val {
	if v, ok := f.vals[key]; ok {
		return v
	}
	return val{path: join(f.v.path, key), line: f.v.line}
}

// required is get, reporting a missing key.
func (f *fields) required(key string) val {
	v := f.get(key)
	if v.n == nil && f.ok {
		f.d.errorf(v, "required")
	}
	return v
}

// unknownKey words the message for a key not in known, suggesting a near
// spelling.
func unknownKey(key string, known []string) string {
	best, bestDist := "", 3
	for _, k := range known {
		if dist := editDistance(strings.ToLower(key), k); dist < bestDist {
			best, bestDist = k, dist
		}
	}
	if best != "" {
		return fmt.Sprintf("unknown key (did you mean %s?)", best)
	}
	return "unknown key (want " + orList(known) + ")"
}

// orList writes "a, b or c".
func orList(words []string) string {
	switch len(words) {
	case 0:
		return ""
	case 1:
		return words[0]
	}
	return strings.Join(words[:len(words)-1], ", ") + " or " + words[len(words)-1]
}

// editDistance is the Levenshtein distance between short strings.
func editDistance(a, b string) int {
	if len(a) > 64 || len(b) > 64 {
		return 64
	}
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

// list returns the items of a list; an absent v gives none.
func (d *decoder) list(v val) []val {
	if v.n == nil {
		return nil
	}
	if v.n.Kind != yaml.SequenceNode {
		d.errorf(v, "want a list, not %s", describe(v.n))
		return nil
	}
	if !d.spend(len(v.n.Content), v.line, v.path) {
		return nil
	}
	items := make([]val, len(v.n.Content))
	for i, it := range v.n.Content {
		p := index(v.path, i)
		d.lines[p] = it.Line
		items[i] = val{n: resolve(it), path: p, line: it.Line}
	}
	return items
}

// scalar checks that v is a plain scalar with a standard tag.
func (d *decoder) scalar(v val, want string) bool {
	if v.n.Kind != yaml.ScalarNode {
		d.errorf(v, "want %s, not %s", want, describe(v.n))
		return false
	}
	if tag := v.n.ShortTag(); !strings.HasPrefix(tag, "!!") {
		d.errorf(v, "unsupported YAML tag %q", tag)
		return false
	}
	return true
}

// str decodes any scalar as its text.
func (d *decoder) str(v val) (string, bool) {
	if !d.scalar(v, "a string") {
		return "", false
	}
	return v.n.Value, true
}

// number decodes a bare YAML number; NaN and infinities are refused.
func (d *decoder) number(v val) (float64, bool) {
	if !d.scalar(v, "a number") {
		return 0, false
	}
	switch v.n.ShortTag() {
	case "!!int", "!!float":
	default:
		d.errorf(v, "want a number, not %s", describe(v.n))
		return 0, false
	}
	var x float64
	if err := v.n.Decode(&x); err != nil {
		d.errorf(v, "bad number %q", v.n.Value)
		return 0, false
	}
	if math.IsNaN(x) || math.IsInf(x, 0) {
		d.errorf(v, "must be a finite number")
		return 0, false
	}
	return x, true
}

// integer decodes a whole number within lo..hi.
func (d *decoder) integer(v val, lo, hi int64) (int64, bool) {
	if !d.scalar(v, "a whole number") {
		return 0, false
	}
	var i int64
	switch v.n.ShortTag() {
	case "!!int":
		if err := v.n.Decode(&i); err != nil {
			d.errorf(v, "%s is out of range %d..%d", v.n.Value, lo, hi)
			return 0, false
		}
	case "!!float":
		x, ok := d.number(v)
		if !ok {
			return 0, false
		}
		if x != math.Trunc(x) {
			d.errorf(v, "want a whole number, not %s", v.n.Value)
			return 0, false
		}
		if x < float64(lo) || x > float64(hi) {
			d.errorf(v, "%s is out of range %d..%d", v.n.Value, lo, hi)
			return 0, false
		}
		i = int64(x)
	default:
		d.errorf(v, "want a whole number, not %s", describe(v.n))
		return 0, false
	}
	if i < lo || i > hi {
		d.errorf(v, "%d is out of range %d..%d", i, lo, hi)
		return 0, false
	}
	return i, true
}

// boolean decodes true or false.
func (d *decoder) boolean(v val) (bool, bool) {
	if !d.scalar(v, "true or false") {
		return false, false
	}
	var b bool
	if v.n.ShortTag() != "!!bool" || v.n.Decode(&b) != nil {
		d.errorf(v, "want true or false, not %s", describe(v.n))
		return false, false
	}
	return b, true
}

// quantity decodes a number with a unit of kind k through parse.
func (d *decoder) quantity(v val, k *kind, parse func(string) (float64, error)) (float64, bool) {
	if !d.scalar(v, k.what) {
		return 0, false
	}
	switch v.n.ShortTag() {
	case "!!int", "!!float":
		if !k.percent {
			d.errorf(v, "missing unit (want %s)", k.what)
			return 0, false
		}
		x, ok := d.number(v)
		if !ok {
			return 0, false
		}
		f, err := bareFraction(x)
		if err != nil {
			d.errorf(v, "%v", err)
			return 0, false
		}
		return f, true
	case "!!str":
		x, err := parse(v.n.Value)
		if err != nil {
			d.errorf(v, "%v", err)
			return 0, false
		}
		return x, true
	}
	d.errorf(v, "want %s, not %s", k.what, describe(v.n))
	return 0, false
}

func (d *decoder) length(v val) (float64, bool) {
	return d.quantity(v, &lengthKind, ParseLength)
}

func (d *decoder) temperature(v val) (float64, bool) {
	return d.quantity(v, &temperatureKind, ParseTemperature)
}

func (d *decoder) fraction(v val) (float64, bool) {
	return d.quantity(v, &fractionKind, ParseFraction)
}

func (d *decoder) lengthTemperature(v val) (float64, bool) {
	return d.quantity(v, &lengthTemperatureKind, ParseLengthTemperature)
}

// duration decodes a Go duration with its unit.
func (d *decoder) duration(v val) (time.Duration, bool) {
	const what = "a duration such as 500ms"
	if !d.scalar(v, what) {
		return 0, false
	}
	switch v.n.ShortTag() {
	case "!!int", "!!float":
		d.errorf(v, "missing unit (want %s)", what)
		return 0, false
	case "!!str":
		x, err := ParseDuration(v.n.Value)
		if err != nil {
			d.errorf(v, "%v", err)
			return 0, false
		}
		return x, true
	}
	d.errorf(v, "want %s, not %s", what, describe(v.n))
	return 0, false
}

// positiveDuration decodes a duration that must be above zero.
func (d *decoder) positiveDuration(v val) (time.Duration, bool) {
	x, ok := d.duration(v)
	if ok && x <= 0 {
		d.errorf(v, "must be positive")
		return 0, false
	}
	return x, ok
}

// choice decodes a string that must be one of options.
func (d *decoder) choice(v val, what string, options ...string) (string, bool) {
	s, ok := d.str(v)
	if !ok {
		return "", false
	}
	if !slices.Contains(options, s) {
		d.errorf(v, "unknown %s %q (want %s)", what, s, orList(options))
		return "", false
	}
	return s, true
}
