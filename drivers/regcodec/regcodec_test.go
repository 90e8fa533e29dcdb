package regcodec

import (
	"errors"
	"math"
	"testing"
)

var allOrders = map[string][]string{
	"int16":   {"AB", "BA"},
	"uint16":  {"AB", "BA"},
	"int32":   {"ABCD", "CDAB", "BADC", "DCBA"},
	"uint32":  {"ABCD", "CDAB", "BADC", "DCBA"},
	"float32": {"ABCD", "CDAB", "BADC", "DCBA"},
	"float64": {"ABCDEFGH", "GHEFCDAB", "BADCFEHG", "HGFEDCBA"},
}

// Values every type can hold exactly, plus each type's extremes.
func samples(typ string) []float64 {
	switch typ {
	case "int16":
		return []float64{0, 1, -1, 555, math.MaxInt16, math.MinInt16}
	case "uint16":
		return []float64{0, 1, 555, 0x1234, math.MaxUint16}
	case "int32":
		return []float64{0, -1, 100000, -123456789, math.MaxInt32, math.MinInt32}
	case "uint32":
		return []float64{0, 1, 0x12345678, math.MaxUint32}
	case "float32":
		return []float64{0, 1, -1, 100, float64(float32(0.1)), float64(float32(123.456)), float64(float32(101.325)), math.MaxFloat32, -math.SmallestNonzeroFloat32}
	default:
		return []float64{0, 1, -1, 0.1, 123.456, 101325.0001, math.MaxFloat64, math.SmallestNonzeroFloat64}
	}
}

func TestRoundTripEveryTypeAndOrder(t *testing.T) {
	for typ, ords := range allOrders {
		for _, ord := range ords {
			s, err := ParseSpec(typ, ord)
			if err != nil {
				t.Fatalf("ParseSpec(%s,%s): %v", typ, ord, err)
			}
			for _, v := range samples(typ) {
				w, err := Encode(v, s)
				if err != nil {
					t.Fatalf("Encode(%g,%v): %v", v, s, err)
				}
				if len(w) != s.Words() {
					t.Fatalf("Encode(%g,%v) gave %d words, want %d", v, s, len(w), s.Words())
				}
				got, err := Decode(w, s)
				if err != nil {
					t.Fatalf("Decode(%04X,%v): %v", w, s, err)
				}
				if got != v {
					t.Errorf("%v: %g → %04X → %g", s, v, w, got)
				}
			}
		}
	}
}

// Vectors from REFERENCES.md §9.2 (IEEE-754 bit patterns, recomputed [X]):
// 123.456f = 0x42F6E979 and its placement in each order.
func TestFloat32ReferenceVectors(t *testing.T) {
	cases := []struct {
		order string
		v     float32
		words []uint16
	}{
		{"ABCD", 123.456, []uint16{0x42F6, 0xE979}},
		{"CDAB", 123.456, []uint16{0xE979, 0x42F6}},
		{"BADC", 123.456, []uint16{0xF642, 0x79E9}},
		{"DCBA", 123.456, []uint16{0x79E9, 0xF642}},
		{"ABCD", 1.0, []uint16{0x3F80, 0x0000}},
		{"ABCD", -1.0, []uint16{0xBF80, 0x0000}},
		{"ABCD", 100.0, []uint16{0x42C8, 0x0000}},
		{"ABCD", 0.1, []uint16{0x3DCC, 0xCCCD}},
		{"CDAB", 0.1, []uint16{0xCCCD, 0x3DCC}},
		// LIBRARY-NOTES §1.1 (verified against the library): 0x42CA,0xA666 is 101.325.
		{"ABCD", 101.325, []uint16{0x42CA, 0xA666}},
	}
	for _, c := range cases {
		s, err := ParseSpec("float32", c.order)
		if err != nil {
			t.Fatal(err)
		}
		w, err := Encode(float64(c.v), s)
		if err != nil {
			t.Fatal(err)
		}
		if w[0] != c.words[0] || w[1] != c.words[1] {
			t.Errorf("Encode(%g,%s) = %04X, want %04X", c.v, c.order, w, c.words)
		}
		got, err := Decode(c.words, s)
		if err != nil {
			t.Fatal(err)
		}
		if got != float64(c.v) {
			t.Errorf("Decode(%04X,%s) = %.17g, want %.17g", c.words, c.order, got, float64(c.v))
		}
	}
	// REFERENCES §9.2: 123.456f decodes back to 123.45600128173828.
	s, _ := ParseSpec("float32", "ABCD")
	got, _ := Decode([]uint16{0x42F6, 0xE979}, s)
	if math.Abs(got-123.45600128173828) > 1e-14 {
		t.Errorf("123.456f decoded to %.17g", got)
	}
}

// Integer and float64 placements worked out by hand from the big-endian bytes.
func TestIntegerAndFloat64Placement(t *testing.T) {
	cases := []struct {
		typ, order string
		v          float64
		words      []uint16
	}{
		// REFERENCES §9.1: FC03 reply values 555, 0, 100 are 0x022B, 0x0000, 0x0064.
		{"uint16", "AB", 555, []uint16{0x022B}},
		{"uint16", "BA", 555, []uint16{0x2B02}},
		{"int16", "AB", -2, []uint16{0xFFFE}},
		{"int32", "ABCD", 0x12345678, []uint16{0x1234, 0x5678}},
		{"int32", "CDAB", 0x12345678, []uint16{0x5678, 0x1234}},
		{"int32", "BADC", 0x12345678, []uint16{0x3412, 0x7856}},
		{"int32", "DCBA", 0x12345678, []uint16{0x7856, 0x3412}},
		{"int32", "ABCD", -2, []uint16{0xFFFF, 0xFFFE}},
		{"uint32", "CDAB", 0xDEADBEEF, []uint16{0xBEEF, 0xDEAD}},
		// 1.0 as IEEE-754 double is 0x3FF0000000000000.
		{"float64", "ABCDEFGH", 1.0, []uint16{0x3FF0, 0, 0, 0}},
		{"float64", "HGFEDCBA", 1.0, []uint16{0, 0, 0, 0xF03F}},
		{"float64", "GHEFCDAB", 1.0, []uint16{0, 0, 0, 0x3FF0}},
		{"float64", "BADCFEHG", 1.0, []uint16{0xF03F, 0, 0, 0}},
		// 0.1 as a double is 0x3FB999999999999A.
		{"float64", "CDAB", 0.1, []uint16{0x999A, 0x9999, 0x9999, 0x3FB9}},
	}
	for _, c := range cases {
		s, err := ParseSpec(c.typ, c.order)
		if err != nil {
			t.Fatal(err)
		}
		w, err := Encode(c.v, s)
		if err != nil {
			t.Fatal(err)
		}
		for i := range w {
			if w[i] != c.words[i] {
				t.Errorf("Encode(%g,%v) = %04X, want %04X", c.v, s, w, c.words)
				break
			}
		}
	}
}

func TestEncodeRejectsOutOfRange(t *testing.T) {
	cases := []struct {
		typ string
		v   float64
	}{
		{"int16", 32768}, {"int16", -32769}, {"uint16", -1}, {"uint16", 65536},
		{"int32", 2147483648}, {"uint32", -0.6}, {"uint32", 4294967296},
		{"int16", math.NaN()}, {"uint32", math.Inf(1)}, {"float32", 1e39},
	}
	for _, c := range cases {
		s, _ := ParseSpec(c.typ, "ABCD")
		if _, err := Encode(c.v, s); !errors.Is(err, ErrRange) {
			t.Errorf("Encode(%g,%s) err = %v, want ErrRange", c.v, c.typ, err)
		}
	}
	// Rounding to the nearest integer keeps in-range fractions.
	s, _ := ParseSpec("int16", "AB")
	if w, err := Encode(-1.4, s); err != nil || w[0] != 0xFFFF {
		t.Errorf("Encode(-1.4,int16) = %04X, %v", w, err)
	}
}

func TestParseSpecErrors(t *testing.T) {
	bad := [][2]string{{"float", "ABCD"}, {"int64", ""}, {"float32", "ABDC"}, {"float32", "ABCDEFGH"}, {"int16", "CD"},
		{"float32", ""}, {"int16", " "}} // no order: the configuration must say which
	for _, b := range bad {
		if _, err := ParseSpec(b[0], b[1]); err == nil {
			t.Errorf("ParseSpec(%q,%q) accepted", b[0], b[1])
		}
	}
	s, err := ParseSpec(" Float64 ", "cdab")
	if err != nil || s.WordOrder != "GHEFCDAB" || s.Words() != 4 {
		t.Errorf("alias: %v %v", s, err)
	}
	if (Spec{Type: "nope"}).Words() != 0 {
		t.Error("invalid spec has words")
	}
}

func TestDecodeErrors(t *testing.T) {
	s, _ := ParseSpec("float32", "ABCD")
	if _, err := Decode([]uint16{1}, s); err == nil {
		t.Error("short word slice accepted")
	}
	if _, err := Decode([]uint16{0x7FC0, 0}, s); err == nil {
		t.Error("NaN accepted")
	}
	if _, err := Decode([]uint16{0x7F80, 0}, s); err == nil {
		t.Error("+Inf accepted")
	}
	if _, err := Decode([]uint16{1, 2}, Spec{Type: "float32", WordOrder: "XYZW"}); err == nil {
		t.Error("hand-built bad spec accepted")
	}
}

func TestLinear(t *testing.T) {
	cases := []struct {
		scale, offset float64
		raw, val      float64
	}{
		{1, 0, 12.5, 12.5},
		{0.01, 0, 10132, 101.32}, // counts of 0.01 bar
		{0.1, -100, 1000, 0},     // offset for a compound range
		{-2, 5, 1, 3},            // a falling characteristic is still a scaling
	}
	for _, c := range cases {
		l, err := NewLinear(c.scale, c.offset)
		if err != nil {
			t.Fatalf("NewLinear(%g, %g): %v", c.scale, c.offset, err)
		}
		if got := l.Apply(c.raw); math.Abs(got-c.val) > 1e-9 {
			t.Errorf("%+v.Apply(%g) = %g, want %g", l, c.raw, got, c.val)
		}
		if got := l.Invert(c.val); math.Abs(got-c.raw) > 1e-9 {
			t.Errorf("%+v.Invert(%g) = %g, want %g", l, c.val, got, c.raw)
		}
	}
}

func TestNewLinearRefusesWhatIsNoScaling(t *testing.T) {
	for _, c := range []struct {
		name          string
		scale, offset float64
	}{
		{"zero scale", 0, 0},
		{"NaN scale", math.NaN(), 0},
		{"infinite scale", math.Inf(1), 0},
		{"NaN offset", 1, math.NaN()},
		{"infinite offset", 1, math.Inf(-1)},
	} {
		if _, err := NewLinear(c.scale, c.offset); err == nil {
			t.Errorf("%s: accepted", c.name)
		}
	}
}

func TestHex(t *testing.T) {
	for _, c := range []struct {
		words []uint16
		want  string
	}{
		{nil, ""},
		{[]uint16{0x42F6, 0xE979}, "42F6 E979"},
		{[]uint16{0, 0xF, 0xABCD, 0xFFFF}, "0000 000F ABCD FFFF"},
	} {
		if got := Hex(c.words); got != c.want {
			t.Errorf("Hex(%04X) = %q, want %q", c.words, got, c.want)
		}
	}
}

// Decode takes words from outside; it must never panic, and whatever it
// accepts must encode back to the same words (the decoding is exact).
func FuzzDecode(f *testing.F) {
	f.Add("float32", "CDAB", uint16(0xE979), uint16(0x42F6), uint16(0), uint16(0), 2)
	f.Add("float64", "ABCDEFGH", uint16(0x3FF0), uint16(0), uint16(0), uint16(0), 4)
	f.Add("int16", "BA", uint16(0xFFFF), uint16(0), uint16(0), uint16(0), 1)
	f.Add("uint32", "DCBA", uint16(1), uint16(2), uint16(3), uint16(4), 3)
	f.Fuzz(func(t *testing.T, typ, order string, a, b, c, d uint16, n int) {
		words := []uint16{a, b, c, d}
		if n < 0 || n > 4 {
			n = 4
		}
		words = words[:n]
		s, err := ParseSpec(typ, order)
		if err != nil {
			return
		}
		v, err := Decode(words, s)
		if err != nil {
			return
		}
		back, err := Encode(v, s)
		if err != nil {
			t.Fatalf("decoded %g from %04X (%v) but cannot encode it: %v", v, words, s, err)
		}
		for i := range back {
			// -0 and +0 are both valid decodes; compare through the value for floats.
			if back[i] != words[i] && v != 0 {
				t.Fatalf("%v: %04X → %g → %04X", s, words, v, back)
			}
		}
	})
}
