package config

import (
	"fmt"
	"io"
	"os"
	"reflect"
	"regexp"
	"sort"
	"strconv"
	"strings"
	"unicode/utf8"

	"github.com/go-viper/mapstructure/v2"
	"github.com/spf13/viper"
	"go.yaml.in/yaml/v3"
)

// EnvPrefix is the prefix of environment overrides: store.path is
// PLATEAU_STORE_PATH. Lists (instruments, procedure points) come from the
// file only.
const EnvPrefix = "PLATEAU"

// MaxFileSize is the largest configuration file plateau reads. A bench's
// file is a few kilobytes; anything near this is a mistake, refused before
// any of it is parsed.
const MaxFileSize = 1 << 20

// Load reads, decodes, defaults, resolves and validates the file at path.
func Load(path string) (*Config, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("read config: %w", err)
	}
	defer f.Close()
	if fi, err := f.Stat(); err == nil && fi.Mode().IsRegular() && fi.Size() > MaxFileSize {
		return nil, tooBig(path, fi.Size())
	}
	data, err := io.ReadAll(io.LimitReader(f, MaxFileSize+1))
	if err != nil {
		return nil, fmt.Errorf("read config %s: %w", path, err)
	}
	return Parse(data, path)
}

func tooBig(name string, size int64) error {
	return fmt.Errorf("%s: %d bytes is more than a configuration file may hold (%d bytes); is this the right file?", name, size, MaxFileSize)
}

// Parse does what Load does on bytes already read; name is used in messages.
// The returned error is a *Problems when the file was read but is wrong.
// Warnings alone do not fail: they are in Config.Warnings.
func Parse(data []byte, name string) (*Config, error) {
	if len(data) > MaxFileSize {
		return nil, tooBig(name, int64(len(data)))
	}
	p := newProblems(name)
	if line, col, ok := invalidUTF8(data); ok {
		p.add(Problem{Line: line, Msg: fmt.Sprintf("column %d: the file is not UTF-8 text; save it as UTF-8", col)})
		return nil, p
	}
	var root yaml.Node
	if err := yaml.Unmarshal(data, &root); err != nil {
		p.add(syntaxProblem(err))
		return nil, p
	}
	tree := map[string]any{}
	if len(root.Content) > 0 {
		doc := root.Content[0]
		if doc.Kind != yaml.MappingNode && !(doc.Kind == yaml.ScalarNode && doc.Tag == "!!null") {
			p.add(Problem{Line: doc.Line, Msg: "the file must be a mapping of keys such as store:, instruments:, device:"})
			return nil, p
		}
		if m, ok := walk(doc, reflect.TypeOf(Config{}), "", p).(map[string]any); ok {
			tree = m
		}
	}

	v := viper.New()
	for k, val := range defaults() {
		v.SetDefault(k, val)
	}
	v.SetEnvPrefix(EnvPrefix)
	v.SetEnvKeyReplacer(strings.NewReplacer(".", "_"))
	v.AutomaticEnv()
	envProblems(p)
	// The tree holds only known keys, each once: decoding it costs time in
	// proportion to the file, whatever the file holds.
	if err := v.MergeConfigMap(tree); err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	var cfg Config
	err := v.UnmarshalExact(&cfg, func(dc *mapstructure.DecoderConfig) {
		dc.WeaklyTypedInput = false // "abc" for a number is an error, not a zero
		dc.DecodeHook = decodeHook
	})
	if err != nil {
		decodeProblems(err, p)
	}
	cfg.File = name
	for i := range cfg.Instruments {
		instrumentDefaults(&cfg.Instruments[i])
	}
	cfg.resolve(p)
	cfg.validate(p)
	p.sort()
	if p.Errors() > 0 {
		return nil, p
	}
	cfg.Warnings = p.Warnings()
	return &cfg, nil
}

var yamlLine = regexp.MustCompile(`^(?:yaml: )?line (\d+): (.*)$`)

// syntaxProblem turns the YAML parser's complaint into a problem on its line.
func syntaxProblem(err error) Problem {
	msg := strings.TrimPrefix(err.Error(), "yaml: ")
	q := Problem{Msg: "cannot be read as YAML: " + msg}
	if m := yamlLine.FindStringSubmatch(err.Error()); m != nil {
		q.Line, _ = strconv.Atoi(m[1])
		q.Msg = "cannot be read as YAML: " + m[2] + " (look at the indentation and the brackets on this line and the one before)"
	}
	return q
}

// invalidUTF8 finds the first byte sequence that is not UTF-8 and says
// where it is (1-based line and column, in characters).
func invalidUTF8(data []byte) (line, col int, found bool) {
	if utf8.Valid(data) {
		return 0, 0, false
	}
	line, col = 1, 1
	for len(data) > 0 {
		r, n := utf8.DecodeRune(data)
		if r == utf8.RuneError && n <= 1 {
			return line, col, true
		}
		if r == '\n' {
			line, col = line+1, 0
		}
		col++
		data = data[n:]
	}
	return line, col, true
}

// walk checks every key in the YAML tree against the struct it decodes
// into, records its line, reports unknown and repeated keys (with a
// suggestion) and values of the wrong shape, and returns the tree of what
// is left as plain values for the decoder. Each node is visited once.
func walk(n *yaml.Node, t reflect.Type, path string, p *Problems) any {
	if p.walked++; p.walked > maxWalked {
		if p.walked == maxWalked+1 {
			p.add(Problem{Line: n.Line, Msg: "the file expands to too many values through anchors and aliases (*name)"})
		}
		return nil
	}
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	if n.Kind == yaml.AliasNode && n.Alias != nil {
		n = n.Alias
	}
	wrong := func(found string) any {
		want := plainType(t)
		if t.Kind() == reflect.Slice {
			want = "a list such as [a, b, c] or one entry a line, each after a dash"
		}
		p.add(Problem{Line: n.Line, Key: path, Msg: fmt.Sprintf("expected %s, found %s", want, found)})
		p.failed[strings.ToLower(path)] = true
		return nil
	}
	switch {
	case n.Kind == yaml.ScalarNode && n.Tag == "!!null":
		return nil
	case t.Kind() == reflect.Struct:
		if n.Kind != yaml.MappingNode {
			return wrong(nodeName(n))
		}
		out := map[string]any{}
		walkMapping(n, t, path, p, out, map[string]int{})
		return out
	case t.Kind() == reflect.Slice:
		if n.Kind != yaml.SequenceNode {
			return wrong(nodeName(n))
		}
		out := make([]any, 0, len(n.Content))
		for i, item := range n.Content {
			key := fmt.Sprintf("%s[%d]", path, i)
			p.lines[strings.ToLower(key)] = item.Line
			out = append(out, walk(item, t.Elem(), key, p))
		}
		return out
	case n.Kind != yaml.ScalarNode:
		return wrong(nodeName(n))
	}
	return scalar(n)
}

// maxWalked bounds the values walked, aliases expanded: far more than a
// file of MaxFileSize holds, far fewer than an alias bomb makes.
const maxWalked = 2_000_000

// walkMapping adds the keys of one mapping to out. seen holds the keys
// already given at this level (and their lines) to catch repeats; a merge
// key (<<: *anchor) brings in keys that the mapping itself may override.
func walkMapping(n *yaml.Node, t reflect.Type, path string, p *Problems, out map[string]any, seen map[string]int) {
	keys := p.keysOf(t)
	fields := keys.types
	var merges []*yaml.Node
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, val := n.Content[i], n.Content[i+1]
		if k.Tag == "!!merge" || k.Value == "<<" {
			merges = append(merges, val)
			continue
		}
		name := strings.ToLower(k.Value)
		key := join(path, k.Value)
		if first, dup := seen[name]; dup {
			p.add(Problem{Line: k.Line, Key: key, Msg: fmt.Sprintf("is given twice (also on line %d); keep one", first)})
			continue
		}
		seen[name] = k.Line
		ft, ok := fields[name]
		if !ok {
			if p.full() {
				p.count(false) // only counted: no suggestion worked out for it
			} else {
				p.add(Problem{Line: k.Line, Key: key, Msg: keys.unknown(name)})
			}
			continue
		}
		p.lines[strings.ToLower(key)] = k.Line
		if v := walk(val, ft, key, p); v != nil {
			out[name] = v
		}
	}
	// Keys of the mapping itself win over merged ones, and keep their lines.
	own := map[string]int{}
	for k := range seen {
		own[k] = p.lines[strings.ToLower(join(path, k))]
	}
	defer func() {
		for k, line := range own {
			p.lines[strings.ToLower(join(path, k))] = line
		}
	}()
	for _, m := range merges {
		if m.Kind == yaml.AliasNode && m.Alias != nil {
			m = m.Alias
		}
		list := []*yaml.Node{m}
		if m.Kind == yaml.SequenceNode {
			list = m.Content
		}
		for _, src := range list {
			if src.Kind == yaml.AliasNode && src.Alias != nil {
				src = src.Alias
			}
			if src.Kind != yaml.MappingNode {
				p.add(Problem{Line: src.Line, Key: path, Msg: "<< merges a mapping (an &anchor of keys), not " + nodeName(src)})
				continue
			}
			merged := map[string]any{}
			walkMapping(src, t, path, p, merged, map[string]int{})
			for k, v := range merged {
				if _, mine := seen[k]; !mine {
					out[k] = v
					seen[k] = src.Line
				}
			}
		}
	}
}

// structKeys are the keys of one struct, worked out once per Parse.
type structKeys struct {
	types  map[string]reflect.Type
	sorted []string
	list   string // "a, b, c"
}

func (p *Problems) keysOf(t reflect.Type) *structKeys {
	if k, ok := p.structs[t]; ok {
		return k
	}
	k := &structKeys{types: fieldsOf(t)}
	for f := range k.types {
		k.sorted = append(k.sorted, f)
	}
	sort.Strings(k.sorted)
	k.list = strings.Join(k.sorted, ", ")
	p.structs[t] = k
	return k
}

func (k *structKeys) unknown(name string) string {
	if s := closest(name, k.sorted); s != "" {
		return fmt.Sprintf("unknown key; did you mean %q?", s)
	}
	return "unknown key; allowed here: " + k.list
}

// fieldsOf maps the keys of a struct (its mapstructure tags, squashed
// embeddings included) to their types.
func fieldsOf(t reflect.Type) map[string]reflect.Type {
	fields := map[string]reflect.Type{}
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		tag := f.Tag.Get("mapstructure")
		if strings.HasSuffix(tag, ",squash") && f.Type.Kind() == reflect.Struct {
			for k, v := range fieldsOf(f.Type) {
				fields[k] = v
			}
			continue
		}
		if tag == "" || tag == "-" {
			continue
		}
		fields[tag] = f.Type
	}
	return fields
}

// scalar gives a scalar node's value as YAML reads it (a number, a
// boolean, a date or text).
func scalar(n *yaml.Node) any {
	var v any
	if err := n.Decode(&v); err != nil {
		return n.Value
	}
	return v
}

func nodeName(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping of keys"
	case yaml.SequenceNode:
		return "a list"
	}
	return fmt.Sprintf("%q", n.Value)
}

func join(path, key string) string {
	if path == "" {
		return key
	}
	return path + "." + key
}

// closest returns the candidate nearest to s by edit distance, if near enough
// to be a plausible typo.
func closest(s string, candidates []string) string {
	best, bestD := "", 1<<30
	for _, c := range candidates {
		d := editDistance(s, c)
		if d < bestD || (d == bestD && c < best) {
			best, bestD = c, d
		}
	}
	if bestD <= max(2, len(s)/3) {
		return best
	}
	return ""
}

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
