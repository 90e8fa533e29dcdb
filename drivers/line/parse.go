// Package line reads line-oriented ASCII instruments on a serial port with
// go.bug.st/serial: instruments that answer a query, and instruments that
// stream readings unprompted. Each reading keeps its reply line.
package line

import (
	"errors"
	"fmt"
	"math"
	"regexp"
	"strconv"
	"strings"
	"unicode/utf8"

	"plateau/analysis/units"
)

// Parse failures, mapped to drivers kinds by the gauge.
var (
	// ErrOverrange: the instrument says it cannot show the value (OL, ----).
	ErrOverrange = errors.New("instrument shows over- or under-range")
	// ErrGarbled: the line is not a reading this parser recognises.
	ErrGarbled = errors.New("garbled reply")
)

// Parser turns one reply line into a number. The zero Parser accepts a line
// holding one number with an optional label before it and an optional unit
// after it ("P1: +1.01325E+00 bar"); anything else on the line is garbage.
// Its only over-range marker is a field of dashes (how displays blank a
// value); words such as OL come from Overload, as configured.
type Parser struct {
	Reply    *regexp.Regexp // optional; group 1 (or the whole match) holds the number
	Overload []string       // words or symbols meaning over/under range, matched as whole tokens, case-insensitively
	Unit     string         // the configured unit; a reply naming another pressure unit is refused
}

// Parse returns the number on line, in the instrument's unit.
func (p Parser) Parse(line string) (float64, error) {
	s := strings.TrimSpace(line)
	if s == "" {
		return 0, fmt.Errorf("%w: empty line", ErrGarbled)
	}
	if p.overload(s) {
		return 0, fmt.Errorf("%w: %q", ErrOverrange, s)
	}
	var num, unit string
	if p.Reply != nil {
		m := p.Reply.FindStringSubmatch(s)
		if m == nil {
			return 0, fmt.Errorf("%w: %q does not match %q", ErrGarbled, s, p.Reply)
		}
		field := m[0]
		if len(m) > 1 {
			field = m[1]
		}
		var ok bool
		if num, unit, ok = splitReading(strings.TrimSpace(field), false); !ok {
			return 0, fmt.Errorf("%w: %q is not a number", ErrGarbled, field)
		}
	} else {
		var ok bool
		if num, unit, ok = splitReading(s, true); !ok {
			return 0, fmt.Errorf("%w: %q", ErrGarbled, s)
		}
	}
	v, err := strconv.ParseFloat(strings.ReplaceAll(num, " ", ""), 64)
	if err != nil || math.IsInf(v, 0) || math.IsNaN(v) {
		return 0, fmt.Errorf("%w: %q is not a finite number", ErrGarbled, num)
	}
	if err := p.checkUnit(unit); err != nil {
		return 0, err
	}
	return v, nil
}

// checkUnit refuses a reply in another pressure unit than configured: someone
// changed the unit on the front panel, and the numbers would be wrong by a factor.
func (p Parser) checkUnit(unit string) error {
	if unit == "" || p.Unit == "" {
		return nil
	}
	got, ok := units.Find(unit)
	if !ok {
		return nil // not a pressure unit (a status letter, "G" for gauge): nothing to compare
	}
	want, ok := units.Find(p.Unit)
	if !ok || got.Symbol == want.Symbol {
		return nil
	}
	return fmt.Errorf("%w: reply is in %s but the instrument is configured in %s", ErrGarbled, got.Symbol, want.Symbol)
}

func (p Parser) overload(s string) bool {
	for rest := s; rest != ""; {
		var tok string
		tok, rest = nextToken(rest)
		// A field of dashes is how displays blank an unreadable value.
		if len(tok) >= 2 && strings.Trim(tok, "-") == "" {
			return true
		}
		bare := strings.TrimLeft(tok, "+-") // "-OL": overload on the negative side
		for _, w := range p.Overload {
			if strings.EqualFold(tok, w) || strings.EqualFold(bare, w) {
				return true
			}
		}
	}
	return false
}

// nextToken returns the first token of s, between the separators a reply
// puts around its fields, and what follows it; without allocating, as a
// poll parses a line on every read.
func nextToken(s string) (tok, rest string) {
	isSep := func(c byte) bool {
		return c == ' ' || c == '\t' || c == ',' || c == ';' || c == ':' || c == '='
	}
	i := 0
	for i < len(s) && isSep(s[i]) {
		i++
	}
	j := i
	for j < len(s) && !isSep(s[j]) {
		j++
	}
	return s[i:j], s[j:]
}

// splitReading splits a reply line into its number and unit: an optional
// label (a letter, then letters, digits, '_' or '.', then ':', '=' or ',' or
// white space), a number (sign, digits with an optional point, exponent)
// and an optional unit (a letter or one of %°²₂/, then those or digits),
// with white space around. It scans by hand rather than by regular
// expression, which allocated on every read; the grammar is the regular
// expression in the tests, which the scan is fuzzed against.
func splitReading(s string, label bool) (num, unit string, ok bool) {
	i := skipSpace(s, 0)
	if label && i < len(s) && isLetter(s[i]) {
		j := i + 1
		for j < len(s) && (isLetter(s[j]) || isDigit(s[j]) || s[j] == '_' || s[j] == '.') {
			j++
		}
		k := skipSpace(s, j)
		if k < len(s) && (s[k] == ':' || s[k] == '=' || s[k] == ',') {
			k = skipSpace(s, k+1)
		} else if k == j {
			return "", "", false // a label runs into the number
		}
		i = k
	}
	start := i
	if i < len(s) && (s[i] == '+' || s[i] == '-') {
		i = skipSpace(s, i+1)
	}
	switch {
	case i < len(s) && isDigit(s[i]):
		i = skipDigits(s, i)
		if i < len(s) && s[i] == '.' {
			i = skipDigits(s, i+1)
		}
	case i+1 < len(s) && s[i] == '.' && isDigit(s[i+1]):
		i = skipDigits(s, i+1)
	default:
		return "", "", false
	}
	if i < len(s) && (s[i] == 'e' || s[i] == 'E') {
		j := i + 1
		if j < len(s) && (s[j] == '+' || s[j] == '-') {
			j++
		}
		if k := skipDigits(s, j); k > j {
			i = k
		}
	}
	num = s[start:i]
	i = skipSpace(s, i)
	if r, n := utf8.DecodeRuneInString(s[i:]); n > 0 && isUnitRune(r, false) {
		u := i + n
		for u < len(s) {
			r, n := utf8.DecodeRuneInString(s[u:])
			if !isUnitRune(r, true) {
				break
			}
			u += n
		}
		unit, i = s[i:u], u
	}
	if skipSpace(s, i) != len(s) {
		return "", "", false
	}
	return num, unit, true
}

// skipSpace passes the white space of a regular expression's \s.
func skipSpace(s string, i int) int {
	for i < len(s) && (s[i] == ' ' || s[i] == '\t' || s[i] == '\n' || s[i] == '\f' || s[i] == '\r') {
		i++
	}
	return i
}

func skipDigits(s string, i int) int {
	for i < len(s) && isDigit(s[i]) {
		i++
	}
	return i
}

func isDigit(c byte) bool  { return '0' <= c && c <= '9' }
func isLetter(c byte) bool { return 'a' <= c && c <= 'z' || 'A' <= c && c <= 'Z' }

// isUnitRune: a unit starts with a letter or one of %°²₂/ and goes on
// with those or digits ("kPa", "%FS", "kgf/cm²", "inH₂O").
func isUnitRune(r rune, more bool) bool {
	switch {
	case r < utf8.RuneSelf && isLetter(byte(r)), r == '%', r == '°', r == '²', r == '₂', r == '/':
		return true
	}
	return more && r < utf8.RuneSelf && isDigit(byte(r))
}
