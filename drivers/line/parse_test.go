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
