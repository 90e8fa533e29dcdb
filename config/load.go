package config

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"reflect"
	"regexp"
	"sort"
	"strings"
	"time"

	"github.com/go-viper/mapstructure/v2"
	"github.com/spf13/viper"
	"go.yaml.in/yaml/v3"
)

// EnvPrefix is the prefix of environment overrides: store.path is
// PLATEAU_STORE_PATH. Lists (instruments, procedure points) come from the
// file only.
const EnvPrefix = "PLATEAU"

// Load reads, decodes, defaults and validates the file at path.
func Load(path string) (*Config, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("read config: %w", err)
	}
	return Parse(data, path)
}

// Parse does what Load does on bytes already read; name is used in messages.
func Parse(data []byte, name string) (*Config, error) {
	var root yaml.Node
	if err := yaml.Unmarshal(data, &root); err != nil {
		return nil, fmt.Errorf("%s: %s", name, strings.TrimPrefix(err.Error(), "yaml: "))
	}
	p := &Problems{File: name, lines: map[string]int{}}
	if len(root.Content) > 0 {
		doc := root.Content[0]
		if doc.Kind != yaml.MappingNode && !(doc.Kind == yaml.ScalarNode && doc.Tag == "!!null") {
			p.add(doc.Line, "", "", "the file must be a mapping of keys such as store:, instruments:, device:")
			return nil, p
		}
		walkKeys(doc, reflect.TypeOf(Config{}), "", p)
	}

	v := viper.New()
	for k, val := range defaults() {
		v.SetDefault(k, val)
	}
	v.SetEnvPrefix(EnvPrefix)
	v.SetEnvKeyReplacer(strings.NewReplacer(".", "_"))
	v.AutomaticEnv()
	v.SetConfigType("yaml")
	if err := v.ReadConfig(bytes.NewReader(data)); err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	var cfg Config
	err := v.UnmarshalExact(&cfg, func(dc *mapstructure.DecoderConfig) {
		dc.WeaklyTypedInput = false // "abc" for a number is an error, not a zero
		dc.DecodeHook = mapstructure.ComposeDecodeHookFunc(
			mapstructure.StringToTimeDurationHookFunc(),
			weakNumbers,
		)
	})
	if err != nil {
		decodeProblems(err, p)
	}
	if p.Len() > 0 {
		p.sort()
		return nil, p
	}
	cfg.File = name
	for i := range cfg.Instruments {
		instrumentDefaults(&cfg.Instruments[i])
	}
	cfg.validate(p)
	if p.Len() > 0 {
		p.sort()
		return nil, p
	}
	return &cfg, nil
}

// weakNumbers lets environment overrides (always strings) and YAML ints
// reach numeric and boolean fields, without accepting nonsense.
func weakNumbers(from, to reflect.Type, data any) (any, error) {
	if t, ok := data.(time.Time); ok && to.Kind() == reflect.String {
		return t.Format("2006-01-02"), nil // YAML reads an unquoted date as a timestamp
	}
	s, ok := data.(string)
	if from.Kind() == reflect.Int && to.Kind() == reflect.Float64 {
		return float64(reflect.ValueOf(data).Int()), nil
	}
	if !ok {
		return data, nil
	}
	switch to.Kind() {
	case reflect.Int, reflect.Int64:
		if to == reflect.TypeOf(int64(0)) || to.Kind() == reflect.Int {
			var n int64
			if _, err := fmt.Sscan(strings.TrimSpace(s), &n); err != nil {
				return nil, fmt.Errorf("%q is not a whole number", s)
			}
			return n, nil
		}
	case reflect.Float64:
		var f float64
		if _, err := fmt.Sscan(strings.TrimSpace(s), &f); err != nil {
			return nil, fmt.Errorf("%q is not a number", s)
		}
		return f, nil
	case reflect.Bool:
		switch strings.ToLower(strings.TrimSpace(s)) {
		case "true", "yes", "on", "1":
			return true, nil
		case "false", "no", "off", "0":
			return false, nil
		}
		return nil, fmt.Errorf("%q is not true or false", s)
	case reflect.Slice:
		if to.Elem().Kind() == reflect.String {
			parts := strings.Split(s, ",")
			for i := range parts {
				parts[i] = strings.TrimSpace(parts[i])
			}
			return parts, nil
		}
	}
	return data, nil
}

var decodeKey = regexp.MustCompile(`'([^']*)'`)

// decodeProblems turns mapstructure's joined error text into one problem per
// failing key, each with the line the key is on.
func decodeProblems(err error, p *Problems) {
	for _, line := range strings.Split(err.Error(), "\n") {
		line = strings.TrimSpace(strings.TrimPrefix(strings.TrimSpace(line), "*"))
		// Unknown keys were already reported, with a suggestion, by walkKeys.
		if line == "" || strings.HasPrefix(line, "decoding failed") || strings.Contains(line, "has invalid keys") {
			continue
		}
		key := ""
		if m := decodeKey.FindStringSubmatch(line); m != nil {
			key = m[1]
		}
		msg := line
		if i := strings.Index(line, "' "); i >= 0 && key != "" {
			msg = strings.TrimSpace(line[i+2:])
		}
		msg = strings.ReplaceAll(msg, "expected type", "wrong type: expected")
		p.add(p.line(key), key, "", msg)
	}
}

// walkKeys checks every key in the YAML tree against the struct it decodes
// into, records its line, and reports unknown keys with a suggestion.
func walkKeys(n *yaml.Node, t reflect.Type, path string, p *Problems) {
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	switch {
	case n.Kind == yaml.MappingNode && t.Kind() == reflect.Struct:
		fields := map[string]reflect.Type{}
		for i := 0; i < t.NumField(); i++ {
			tag := t.Field(i).Tag.Get("mapstructure")
			if tag == "" || tag == "-" {
				continue
			}
			fields[tag] = t.Field(i).Type
		}
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, val := n.Content[i], n.Content[i+1]
			key := join(path, k.Value)
			p.lines[strings.ToLower(key)] = k.Line
			ft, ok := fields[strings.ToLower(k.Value)]
			if !ok {
				names := make([]string, 0, len(fields))
				for f := range fields {
					names = append(names, f)
				}
				msg := "unknown key"
				if s := closest(strings.ToLower(k.Value), names); s != "" {
					msg += fmt.Sprintf("; did you mean %q?", s)
				} else {
					sort.Strings(names)
					msg += "; allowed here: " + strings.Join(names, ", ")
				}
				p.add(k.Line, key, "", msg)
				continue
			}
			walkKeys(val, ft, key, p)
		}
	case n.Kind == yaml.SequenceNode && t.Kind() == reflect.Slice:
		for i, item := range n.Content {
			key := fmt.Sprintf("%s[%d]", path, i)
			p.lines[strings.ToLower(key)] = item.Line
			walkKeys(item, t.Elem(), key, p)
		}
	case n.Kind == yaml.MappingNode && t.Kind() != reflect.Map:
		p.add(n.Line, path, "", fmt.Sprintf("wrong type: expected %s, found a mapping", kindName(t)))
	case n.Kind == yaml.SequenceNode:
		p.add(n.Line, path, "", fmt.Sprintf("wrong type: expected %s, found a list", kindName(t)))
	case n.Kind == yaml.ScalarNode && t.Kind() == reflect.Struct && n.Tag != "!!null":
		p.add(n.Line, path, n.Value, "wrong type: expected a mapping of keys")
	case n.Kind == yaml.ScalarNode && t.Kind() == reflect.Slice && n.Tag != "!!null":
		p.add(n.Line, path, n.Value, "wrong type: expected a list")
	}
}

func kindName(t reflect.Type) string {
	switch t.Kind() {
	case reflect.Struct:
		return "a mapping of keys"
	case reflect.Slice:
		return "a list"
	case reflect.Int, reflect.Int64:
		if t.String() == "time.Duration" {
			return "a duration such as 30s"
		}
		return "a whole number"
	case reflect.Float64:
		return "a number"
	case reflect.Bool:
		return "true or false"
	}
	return "a single value"
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

// Problem is one thing wrong with the configuration.
type Problem struct {
	File  string
	Line  int // 0 when the key is not in the file (a default or an environment override)
	Key   string
	Value string
	Msg   string
}

func (q Problem) String() string {
	var b strings.Builder
	b.WriteString(q.File)
	if q.Line > 0 {
		fmt.Fprintf(&b, ":%d", q.Line)
	}
	b.WriteString(": ")
	if q.Key != "" {
		b.WriteString(q.Key)
		if q.Value != "" {
			fmt.Fprintf(&b, " = %q", q.Value)
		}
		b.WriteString(": ")
	}
	b.WriteString(q.Msg)
	return b.String()
}

// Problems collects every problem of one file; it is the error Load returns.
type Problems struct {
	File  string
	List  []Problem
	lines map[string]int
}

func (p *Problems) Len() int { return len(p.List) }

// sort orders problems by line, so the report reads top to bottom; problems
// about defaults or environment overrides (line 0) come last.
func (p *Problems) sort() {
	sort.SliceStable(p.List, func(i, j int) bool {
		a, b := p.List[i].Line, p.List[j].Line
		if a == 0 || b == 0 {
			return a != 0 && b == 0
		}
		return a < b
	})
}

func (p *Problems) Error() string {
	out := make([]string, len(p.List))
	for i, q := range p.List {
		out[i] = q.String()
	}
	head := fmt.Sprintf("%d problem(s) in %s:\n  ", len(p.List), p.File)
	return head + strings.Join(out, "\n  ")
}

func (p *Problems) add(line int, key, value, msg string) {
	p.List = append(p.List, Problem{File: p.File, Line: line, Key: key, Value: value, Msg: msg})
}

// line finds the line of a key path, or of its nearest parent in the file.
func (p *Problems) line(key string) int {
	k := strings.ToLower(key)
	for k != "" {
		if l, ok := p.lines[k]; ok {
			return l
		}
		i := strings.LastIndexAny(k, ".[")
		if i < 0 {
			break
		}
		k = k[:i]
	}
	return 0
}

// bad records a problem about a key, finding its line.
func (p *Problems) bad(key, value, msg string, args ...any) {
	p.add(p.line(key), key, value, fmt.Sprintf(msg, args...))
}

// AsProblems extracts the list of problems from an error returned by Load.
func AsProblems(err error) (*Problems, bool) {
	var p *Problems
	ok := errors.As(err, &p)
	return p, ok
}
