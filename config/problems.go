package config

import (
	"errors"
	"fmt"
	"reflect"
	"sort"
	"strings"
)

// Problem is one thing wrong with the configuration, or one thing worth a
// second look (a warning).
type Problem struct {
	File    string
	Line    int    // 0 when the key is not in the file (a default or an environment override)
	Env     string // the PLATEAU_* variable the value came from, when it did
	Key     string
	Value   string
	Msg     string
	Warning bool // the run can go ahead, but the result may not be what was meant
}

func (q Problem) String() string {
	var b strings.Builder
	switch {
	case q.Env != "":
		// The value is not in the file: name the variable, not a line.
		fmt.Fprintf(&b, "environment %s", q.Env)
		if q.Value != "" {
			fmt.Fprintf(&b, "=%q", q.Value)
		}
		if q.Key != "" {
			fmt.Fprintf(&b, " (%s)", q.Key)
		}
		b.WriteString(": ")
	default:
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
	}
	if q.Warning {
		b.WriteString("warning: ")
	}
	b.WriteString(q.Msg)
	return b.String()
}

// maxListed bounds the problems Error prints, maxKept those kept at all:
// a file of ten thousand unknown keys is refused with the first of them
// and a count, without holding ten thousand messages.
const (
	maxListed = 100
	maxKept   = 1000
)

// Problems collects every problem of one file; it is the error Load returns
// when at least one of them is not a warning.
type Problems struct {
	File string
	List []Problem

	lines  map[string]int    // lower-case key path → line in the file
	env    map[string]string // lower-case key path → PLATEAU_* variable that set it
	envVal map[string]string // lower-case key path → the variable's value
	failed map[string]bool   // keys whose value could not be decoded
	walked int               // YAML values walked, for the alias bound
	seen   map[Problem]bool
	// dropped counts problems beyond maxKept, droppedErrors those of them
	// that are not warnings.
	dropped, droppedErrors int
	structs                map[reflect.Type]*structKeys
}

func newProblems(file string) *Problems {
	return &Problems{File: file, lines: map[string]int{}, env: map[string]string{}, envVal: map[string]string{}, failed: map[string]bool{}, seen: map[Problem]bool{}, structs: map[reflect.Type]*structKeys{}}
}

// Len counts every problem found, kept in List or not.
func (p *Problems) Len() int { return len(p.List) + p.dropped }

// Errors counts the problems that are not warnings.
func (p *Problems) Errors() int {
	n := p.droppedErrors
	for _, q := range p.List {
		if !q.Warning {
			n++
		}
	}
	return n
}

// Warnings returns the warnings only.
func (p *Problems) Warnings() []Problem {
	var out []Problem
	for _, q := range p.List {
		if q.Warning {
			out = append(out, q)
		}
	}
	return out
}

// sort orders problems by line, so the report reads top to bottom; problems
// about defaults or environment overrides (line 0) come last. Ties go by
// key and message, so the same file always gives the same list.
func (p *Problems) sort() {
	sort.SliceStable(p.List, func(i, j int) bool {
		a, b := p.List[i], p.List[j]
		if (a.Line == 0) != (b.Line == 0) {
			return a.Line != 0
		}
		if a.Line != b.Line {
			return a.Line < b.Line
		}
		if a.Env != b.Env {
			return a.Env < b.Env
		}
		if a.Key != b.Key {
			return keyLess(a.Key, b.Key)
		}
		if a.Warning != b.Warning {
			return !a.Warning
		}
		return a.Msg < b.Msg
	})
}

func (p *Problems) Error() string {
	n := min(len(p.List), maxListed)
	out := make([]string, n)
	for i, q := range p.List[:n] {
		out[i] = q.String()
	}
	if p.Len() > n {
		out = append(out, fmt.Sprintf("… and %d more", p.Len()-n))
	}
	head := fmt.Sprintf("%d problem(s) in %s:\n  ", p.Len(), p.File)
	if w := p.Len() - p.Errors(); w > 0 {
		head = fmt.Sprintf("%d problem(s) and %d warning(s) in %s:\n  ", p.Errors(), w, p.File)
	}
	return head + strings.Join(out, "\n  ")
}

func (p *Problems) add(q Problem) {
	k := strings.ToLower(q.Key)
	for a := k; a != ""; a = parentKey(a) {
		if p.failed[a] {
			return // a follow-on of a value that could not be read at all
		}
	}
	q.File = p.File
	for a := k; a != "" && q.Env == ""; a = parentKey(a) {
		if env, ok := p.env[a]; ok { // the value, or the list it is in, came from the environment
			q.Env, q.Line = env, 0
			if q.Value == "" || a == k {
				q.Value = p.envVal[a]
			}
		}
	}
	if p.seen[q] {
		return // a shared value judged once for each device that uses it
	}
	if p.full() {
		p.count(q.Warning)
		return
	}
	p.seen[q] = true
	p.List = append(p.List, q)
}

// full says no more problems are kept, only counted.
func (p *Problems) full() bool { return len(p.List) >= maxKept }

func (p *Problems) count(warning bool) {
	p.dropped++
	if !warning {
		p.droppedErrors++
	}
}

// keyLess orders key paths with list indices by number: points[2]
// before points[10].
func keyLess(a, b string) bool {
	for a != "" && b != "" {
		if isDigit(a[0]) && isDigit(b[0]) {
			i, j := digits(a), digits(b)
			if i != j {
				return i < j // no leading zeros in indices: shorter is smaller
			}
			if a[:i] != b[:j] {
				return a[:i] < b[:j]
			}
			a, b = a[i:], b[j:]
			continue
		}
		if a[0] != b[0] {
			return a[0] < b[0]
		}
		a, b = a[1:], b[1:]
	}
	return len(a) < len(b)
}

func isDigit(c byte) bool { return c >= '0' && c <= '9' }

func digits(s string) int {
	n := 0
	for n < len(s) && isDigit(s[n]) {
		n++
	}
	return n
}

// parentKey strips the last part of a key path: "a.b[2].c" → "a.b[2]" → "a.b" → "a" → "".
func parentKey(k string) string {
	i := strings.LastIndexAny(k, ".[")
	if i < 0 {
		return ""
	}
	return k[:i]
}

// line finds the line of a key path, or of its nearest parent in the file.
func (p *Problems) line(key string) int {
	for k := strings.ToLower(key); k != ""; k = parentKey(k) {
		if l, ok := p.lines[k]; ok {
			return l
		}
	}
	return 0
}

// bad records a problem about a key, finding its line.
func (p *Problems) bad(key, value, msg string, args ...any) {
	p.add(Problem{Line: p.line(key), Key: key, Value: value, Msg: fmt.Sprintf(msg, args...)})
}

// warn records a warning about a key.
func (p *Problems) warn(key, value, msg string, args ...any) {
	p.add(Problem{Line: p.line(key), Key: key, Value: value, Msg: fmt.Sprintf(msg, args...), Warning: true})
}

// AsProblems extracts the list of problems from an error returned by Load.
func AsProblems(err error) (*Problems, bool) {
	var p *Problems
	ok := errors.As(err, &p)
	return p, ok
}
