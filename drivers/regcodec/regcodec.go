// Package regcodec is plateau's one register codec: it turns Modbus register
// words into numbers and back for the usual value types and word orders. The
// Modbus driver decodes with it (keeping the raw words) and the simulator
// encodes with it, so both sides agree by construction.
//
// Byte and word orders use the ABCD notation: A is the most significant byte
// of the big-endian value. "CDAB" means register n holds bytes C,D and
// register n+1 holds A,B. 64-bit values use the analogous eight-letter names
// (ABCDEFGH, GHEFCDAB, BADCFEHG, HGFEDCBA); the four-letter names are also
// accepted for them and mean the same swap (CDAB → GHEFCDAB and so on).
// 16-bit values only know whether the two bytes of the register are swapped
// (AB, or BA); ABCD/CDAB mean AB and BADC/DCBA mean BA for them.
package regcodec

import (
	"errors"
	"fmt"
	"math"
	"strings"
)

// Spec names a value type and its order on the wire.
type Spec struct {
	Type      string // int16 | uint16 | int32 | uint32 | float32 | float64
	WordOrder string // canonical order name, as returned by ParseSpec

	// Set by ParseSpec so that a decode does not parse the names again; a
	// Spec built by hand is checked on every use instead.
	n  int
	sw swaps
}

var typeWords = map[string]int{
	"int16": 1, "uint16": 1,
	"int32": 2, "uint32": 2, "float32": 2,
	"float64": 4,
}

// swaps records, for each canonical order, whether bytes inside a register
// are swapped and whether the order of registers is reversed.
type swaps struct{ bytes, words bool }

var orders = map[int]map[string]swaps{
	1: {"AB": {false, false}, "BA": {true, false}},
	2: {"ABCD": {false, false}, "CDAB": {false, true}, "BADC": {true, false}, "DCBA": {true, true}},
	4: {"ABCDEFGH": {false, false}, "GHEFCDAB": {false, true}, "BADCFEHG": {true, false}, "HGFEDCBA": {true, true}},
}

// aliases maps the four-letter names onto the other widths.
var aliases = map[int]map[string]string{
	1: {"ABCD": "AB", "CDAB": "AB", "BADC": "BA", "DCBA": "BA"},
	4: {"ABCD": "ABCDEFGH", "CDAB": "GHEFCDAB", "BADC": "BADCFEHG", "DCBA": "HGFEDCBA"},
}

// ParseSpec checks a type and an order and returns the canonical Spec. Both
// are required; the configuration says which order a device uses.
func ParseSpec(typ, order string) (Spec, error) {
	t := strings.ToLower(strings.TrimSpace(typ))
	n, ok := typeWords[t]
	if !ok {
		return Spec{}, fmt.Errorf("value type %q: want one of int16, uint16, int32, uint32, float32, float64", typ)
	}
	o := strings.ToUpper(strings.TrimSpace(order))
	if o == "" {
		return Spec{}, fmt.Errorf("word order for %s is empty: want one of %s", t, orderList(n))
	}
	if a, ok := aliases[n][o]; ok {
		o = a
	}
	sw, ok := orders[n][o]
	if !ok {
		return Spec{}, fmt.Errorf("word order %q for %s: want one of %s", order, t, orderList(n))
	}
	return Spec{Type: t, WordOrder: o, n: n, sw: sw}, nil
}

func orderList(n int) string {
	var names []string
	switch n {
	case 1:
		names = []string{"AB", "BA"}
	case 2:
		names = []string{"ABCD", "CDAB", "BADC", "DCBA"}
	case 4:
		names = []string{"ABCDEFGH", "GHEFCDAB", "BADCFEHG", "HGFEDCBA"}
	}
	return strings.Join(names, ", ")
}

// Words is the number of 16-bit registers the value occupies (0 for an
// invalid Spec).
func (s Spec) Words() int { return typeWords[s.Type] }

func (s Spec) String() string { return s.Type + "/" + s.WordOrder }

// layout validates s (which may have been built by hand) and returns its swaps.
func (s Spec) layout() (int, swaps, error) {
	if s.n > 0 {
		return s.n, s.sw, nil
	}
	p, err := ParseSpec(s.Type, s.WordOrder)
	if err != nil {
		return 0, swaps{}, err
	}
	n := p.Words()
	return n, orders[n][p.WordOrder], nil
}

// ErrRange says a value does not fit the register type.
var ErrRange = errors.New("value out of range for register type")

// Encode turns v into register words in s's order. Integer types round to
// the nearest integer and fail with ErrRange when the result does not fit.
func Encode(v float64, s Spec) ([]uint16, error) {
	n, sw, err := s.layout()
	if err != nil {
		return nil, err
	}
	var bits uint64
	switch s.Type {
	case "float32":
		if !math.IsNaN(v) && !math.IsInf(v, 0) && math.Abs(v) > math.MaxFloat32 {
			return nil, fmt.Errorf("encode %g as float32: %w", v, ErrRange)
		}
		bits = uint64(math.Float32bits(float32(v)))
	case "float64":
		bits = math.Float64bits(v)
	default:
		r := math.Round(v)
		lo, hi := intLimits(s.Type)
		if math.IsNaN(r) || r < lo || r > hi {
			return nil, fmt.Errorf("encode %g as %s (limits %g … %g): %w", v, s.Type, lo, hi, ErrRange)
		}
		bits = uint64(int64(r)) // two's complement for negative values; masked below
	}
	words := make([]uint16, n)
	// Big-endian words first (ABCD…), then apply the order's swaps.
	for i := 0; i < n; i++ {
		words[i] = uint16(bits >> (16 * uint(n-1-i)))
	}
	return arrange(words, sw), nil
}

// Decode turns register words in s's order into a number. It fails when the
// word count does not match the type or a float is NaN or infinite (a device
// that sends those has no measurement to give).
func Decode(words []uint16, s Spec) (float64, error) {
	n, sw, err := s.layout()
	if err != nil {
		return 0, err
	}
	if len(words) != n {
		return 0, fmt.Errorf("decode %s: got %d registers, want %d", s, len(words), n)
	}
	var buf [4]uint16                            // at most four words; a copy so the caller's words stay as they came
	be := arrange(buf[:copy(buf[:], words)], sw) // the swaps are their own inverse
	var bits uint64
	for _, w := range be {
		bits = bits<<16 | uint64(w)
	}
	var v float64
	switch s.Type {
	case "int16":
		v = float64(int16(bits))
	case "uint16":
		v = float64(uint16(bits))
	case "int32":
		v = float64(int32(bits))
	case "uint32":
		v = float64(uint32(bits))
	case "float32":
		v = float64(math.Float32frombits(uint32(bits)))
	case "float64":
		v = math.Float64frombits(bits)
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("decode %s %04X: not a finite number", s, words)
	}
	return v, nil
}

// arrange applies byte and word swaps in place; applying it twice restores
// the input.
func arrange(w []uint16, sw swaps) []uint16 {
	if sw.bytes {
		for i, x := range w {
			w[i] = x<<8 | x>>8
		}
	}
	if sw.words {
		for i, j := 0, len(w)-1; i < j; i, j = i+1, j-1 {
			w[i], w[j] = w[j], w[i]
		}
	}
	return w
}

func intLimits(typ string) (lo, hi float64) {
	switch typ {
	case "int16":
		return math.MinInt16, math.MaxInt16
	case "uint16":
		return 0, math.MaxUint16
	case "int32":
		return math.MinInt32, math.MaxInt32
	default: // uint32
		return 0, math.MaxUint32
	}
}

// Linear is the scaling from register value to engineering value:
// value = raw × Scale + Offset.
type Linear struct {
	Scale  float64
	Offset float64
}

// NewLinear checks a scaling: a zero gain would map every reading to the
// same number, and a gain or offset that is not finite no number at all.
func NewLinear(scale, offset float64) (Linear, error) {
	if scale == 0 || math.IsNaN(scale) || math.IsInf(scale, 0) {
		return Linear{}, fmt.Errorf("scale %g: want a finite, non-zero number", scale)
	}
	if math.IsNaN(offset) || math.IsInf(offset, 0) {
		return Linear{}, fmt.Errorf("offset %g: want a finite number", offset)
	}
	return Linear{Scale: scale, Offset: offset}, nil
}

// Apply converts a decoded register value into the engineering value.
func (l Linear) Apply(raw float64) float64 { return raw*l.Scale + l.Offset }

// Invert converts an engineering value into the register value to encode.
func (l Linear) Invert(v float64) float64 { return (v - l.Offset) / l.Scale }

const hexDigits = "0123456789ABCDEF"

// Hex writes register words as upper-case hex, four digits each, separated
// by spaces ("42F6 E979"): the audit form of a reading's raw words.
func Hex(words []uint16) string {
	if len(words) == 0 {
		return ""
	}
	b := make([]byte, 0, 5*len(words)-1)
	for i, w := range words {
		if i > 0 {
			b = append(b, ' ')
		}
		b = append(b, hexDigits[w>>12], hexDigits[w>>8&0xF], hexDigits[w>>4&0xF], hexDigits[w&0xF])
	}
	return string(b)
}
