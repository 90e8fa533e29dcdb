package line

import (
	"errors"
	"math"
	"regexp"
	"testing"
)

// common is an overload list as a configuration would give it.
var common = []string{"OL", "OVER", "UNDER"}

func TestParse(t *testing.T) {
	cases := []struct {
		name string
		p    Parser
		line string
		want float64
		err  error
	}{
		{"plain", Parser{}, "1.01325", 1.01325, nil},
		{"sign and exponent", Parser{}, "-1.2345E-02", -0.012345, nil},
		{"plus sign, padded", Parser{}, "  +  12.50  \r", 12.5, nil},
		{"trailing unit", Parser{Unit: "bar"}, "+1.00012 bar", 1.00012, nil},
		{"unit attached", Parser{Unit: "kPa"}, "101.325kPa", 101.325, nil},
		{"label and unit", Parser{Unit: "bar"}, "P1: +6.0001E+00 bar", 6.0001, nil},
		{"label with space", Parser{}, "PRESS 0.500", 0.5, nil},
		{"leading point", Parser{}, ".5", 0.5, nil},
		{"integer", Parser{}, "100", 100, nil},
		{"non-pressure suffix", Parser{Unit: "bar"}, "2.5 G", 2.5, nil},
		{"regex group", Parser{Reply: regexp.MustCompile(`^R,(\S+),OK$`)}, "R,+0.99870,OK", 0.9987, nil},
		{"regex whole", Parser{Reply: regexp.MustCompile(`-?\d+\.\d+`)}, "x 3.25 y", 3.25, nil},
		{"overload OL", Parser{Overload: common}, "OL", 0, ErrOverrange},
		{"no words configured", Parser{}, "OL", 0, ErrGarbled},
		{"overload -OL with unit", Parser{Overload: common}, "-OL bar", 0, ErrOverrange},
		{"dashes", Parser{}, "-----", 0, ErrOverrange},
		{"dashes with label", Parser{}, "P1: ---- bar", 0, ErrOverrange},
		{"configured word", Parser{Overload: []string{"HIGH"}}, "high", 0, ErrOverrange},
		{"signed configured word", Parser{Overload: []string{"OL", "----"}}, "+OL", 0, ErrOverrange},
		{"word inside a label is no overload", Parser{Overload: []string{"OL"}}, "VOLT 1.5", 1.5, nil},
		{"wrong unit", Parser{Unit: "bar"}, "14.5 psi", 0, ErrGarbled},
		{"garbled digits", Parser{}, "1.2#3", 0, ErrGarbled},
		{"two numbers", Parser{}, "1.0 2.0", 0, ErrGarbled},
		{"half line", Parser{}, "E+00 bar", 0, ErrGarbled},
		{"empty", Parser{}, "   ", 0, ErrGarbled},
		{"binary noise", Parser{}, "\x00\xff\x13", 0, ErrGarbled},
		{"exponent only", Parser{}, "e5", 0, ErrGarbled},
		{"overflow", Parser{}, "1e999", 0, ErrGarbled},
		{"nan", Parser{}, "nan", 0, ErrGarbled},
		{"NaN with unit", Parser{Unit: "bar"}, "NaN bar", 0, ErrGarbled},
		{"inf", Parser{}, "inf", 0, ErrGarbled},
		{"signed infinity", Parser{}, "-Infinity", 0, ErrGarbled},
		{"regex captures NaN", Parser{Reply: regexp.MustCompile(`^P=(\S+)$`)}, "P=NaN", 0, ErrGarbled},
		{"regex captures inf", Parser{Reply: regexp.MustCompile(`^P=(\S+)$`)}, "P=+Inf", 0, ErrGarbled},
		{"huge but finite", Parser{}, "1e308", 1e308, nil},
		{"regex no match", Parser{Reply: regexp.MustCompile(`^R,(\S+),OK$`)}, "R,1.0,ERR", 0, ErrGarbled},
		{"regex group not a number", Parser{Reply: regexp.MustCompile(`^R,(\S+)$`)}, "R,abc", 0, ErrGarbled},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got, err := c.p.Parse(c.line)
			if c.err != nil {
				if !errors.Is(err, c.err) {
					t.Fatalf("Parse(%q) = %v, %v; want %v", c.line, got, err, c.err)
				}
				return
			}
			if err != nil || math.Abs(got-c.want) > 1e-12 {
				t.Fatalf("Parse(%q) = %v, %v; want %v", c.line, got, err, c.want)
			}
		})
	}
}

// Lines come from outside: Parse must never panic, must only fail with one
// of its two errors, and never return a non-finite value.
func FuzzParse(f *testing.F) {
	for _, s := range []string{"1.01325", "P1: +6.0001E+00 bar", "OL", "----", "1.2#3", "-1e-3psi", "\x00"} {
		f.Add(s, "bar")
	}
	f.Fuzz(func(t *testing.T, line, unit string) {
		v, err := Parser{Unit: unit}.Parse(line)
		if err != nil {
			if !errors.Is(err, ErrGarbled) && !errors.Is(err, ErrOverrange) {
				t.Fatalf("Parse(%q): unexpected error %v", line, err)
			}
			return
		}
		if math.IsNaN(v) || math.IsInf(v, 0) {
			t.Fatalf("Parse(%q) = %v", line, v)
		}
	})
}

// The grammar splitReading scans, as regular expressions (the parser's own
// until a poll's every read was seen allocating in them): an optional label,
// a number, an optional unit.
var (
	grammarLine = regexp.MustCompile(`^\s*(?:[A-Za-z][A-Za-z0-9_.]*\s*[:=,]?\s+|[A-Za-z][A-Za-z0-9_.]*\s*[:=,]\s*)?` +
		`([+-]?\s*(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z%°²₂/][A-Za-z0-9%°²₂/]*)?\s*$`)
	grammarNumber = regexp.MustCompile(`^\s*([+-]?\s*(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z%°²₂/][A-Za-z0-9%°²₂/]*)?\s*$`)
)

// checkSplit compares splitReading with the grammar's regular expression
// on s, with and without a label.
func checkSplit(t *testing.T, s string) {
	t.Helper()
	for _, c := range []struct {
		label bool
		re    *regexp.Regexp
	}{{true, grammarLine}, {false, grammarNumber}} {
		num, unit, ok := splitReading(s, c.label)
		m := c.re.FindStringSubmatch(s)
		if ok != (m != nil) || ok && (num != m[1] || unit != m[2]) {
			t.Fatalf("splitReading(%q, label %v) = %q, %q, %v; the grammar gives %q", s, c.label, num, unit, ok, m)
		}
	}
}

func TestSplitReadingFollowsTheGrammar(t *testing.T) {
	for _, s := range []string{
		"1.01325", "P1: +6.0001E+00 bar", "PRESS 0.500", "P1 : 5", "P1:5", "P1,,5", "P1 = - 2.5e-3 kgf/cm²",
		"5.bar", "1e5x", "1e+5", "1e", "1e+", "5e bar", "e5", "E+00 bar", "nan", ".5", ".", "+.5 %FS", "+ 5",
		"12 inH₂O", "3 °C", "1.0 2.0", "2.5 G", "-OL", "101.325kPa", "  7\t\r", "x\xff 1", "1 \xff", "1 k\xffPa",
		"_1", "a_b.c 1", "1 /", "1 2a", "P1\t:\t1", "",
	} {
		checkSplit(t, s)
	}
}

// Replies come from outside: the hand scan and the grammar agree on every line.
func FuzzSplitReading(f *testing.F) {
	for _, s := range []string{"P1: +6.0001E+00 bar", "1e5x", "+ .5 %", "12 inH₂O", "5.bar", "\xff"} {
		f.Add(s)
	}
	f.Fuzz(checkSplit)
}

// A good reply parses without allocating: a poll parses one on every read.
func TestParseAllocatesNothing(t *testing.T) {
	for _, c := range []struct {
		p    Parser
		line string
	}{
		{Parser{Unit: "bar", Overload: common}, "P1: +6.0001E+00 bar\r"},
		{Parser{Unit: "kPa"}, "101.325kPa"},
		{Parser{}, "-1.2345E-02"},
	} {
		if n := testing.AllocsPerRun(200, func() { c.p.Parse(c.line) }); n != 0 {
			t.Errorf("Parse(%q) makes %v allocations, want none", c.line, n)
		}
	}
}
