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

// defaultLine: optional label, a number (sign, digits, point, exponent), optional unit.
var defaultLine = regexp.MustCompile(`^\s*(?:[A-Za-z][A-Za-z0-9_.]*\s*[:=,]?\s+|[A-Za-z][A-Za-z0-9_.]*\s*[:=,]\s*)?` +
	`([+-]?\s*(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z%°²₂/][A-Za-z0-9%°²₂/]*)?\s*$`)

var number = regexp.MustCompile(`^([+-]?\s*(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z%°²₂/][A-Za-z0-9%°²₂/]*)?$`)

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
		n := number.FindStringSubmatch(strings.TrimSpace(field))
		if n == nil {
			return 0, fmt.Errorf("%w: %q is not a number", ErrGarbled, field)
		}
		num, unit = n[1], n[2]
	} else {
		m := defaultLine.FindStringSubmatch(s)
		if m == nil {
			return 0, fmt.Errorf("%w: %q", ErrGarbled, s)
		}
		num, unit = m[1], m[2]
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
	words := p.Overload
	for _, tok := range strings.FieldsFunc(s, func(r rune) bool { return r == ' ' || r == '\t' || r == ',' || r == ';' || r == ':' || r == '=' }) {
		// A field of dashes is how displays blank an unreadable value.
		if len(tok) >= 2 && strings.Trim(tok, "-") == "" {
			return true
		}
		bare := strings.TrimLeft(tok, "+-") // "-OL": overload on the negative side
		for _, w := range words {
			if strings.EqualFold(tok, w) || strings.EqualFold(bare, w) {
				return true
			}
		}
	}
	return false
}
