// Package units holds the pressure units plateau accepts at its edges and
// their factors to the pascal. Inside the program every pressure is a float64
// in pascal; a unit is only used to read a configured or instrument value in
// and to print a figure out.
package units

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
	"unicode"
)

// Standard acceleration of gravity, exact by definition (3rd CGPM, 1901).
const StandardGravity = 9.80665

// Exact defining constants from which the non-SI factors follow.
const (
	poundKg        = 0.45359237 // international pound, exact
	inchM          = 0.0254     // international inch, exact
	mercuryDensity = 13595.1    // conventional mercury density, kg/m³
	waterDensity   = 1000.0     // conventional water density, kg/m³
)

// Unit is a pressure unit: its canonical symbol and how many pascals one of it is.
type Unit struct {
	Symbol string
	Pa     float64 // pascals in one unit
	Name   string  // plain-language name, for help texts and reports
}

// ToPa converts a value in this unit to pascal.
func (u Unit) ToPa(v float64) float64 { return v * u.Pa }

// FromPa converts a value in pascal to this unit.
func (u Unit) FromPa(pa float64) float64 { return pa / u.Pa }

func (u Unit) String() string { return u.Symbol }

// The units plateau knows. The factors are exact by definition where the
// definition allows; see NIST SP 811 (2008) Appendix B.8 for the rounded
// printed values these reproduce.
var (
	Pascal      = Unit{"Pa", 1, "pascal"}
	Hectopascal = Unit{"hPa", 100, "hectopascal"}
	Kilopascal  = Unit{"kPa", 1e3, "kilopascal"}
	Megapascal  = Unit{"MPa", 1e6, "megapascal"}
	Bar         = Unit{"bar", 1e5, "bar"}
	Millibar    = Unit{"mbar", 100, "millibar"}
	PSI         = Unit{"psi", poundKg * StandardGravity / (inchM * inchM), "pound-force per square inch"}
	KgfPerCm2   = Unit{"kgf/cm²", 1e4 * StandardGravity, "kilogram-force per square centimetre"}
	Atmosphere  = Unit{"atm", 101325, "standard atmosphere"}
	Torr        = Unit{"Torr", 101325.0 / 760.0, "torr"}
	MmHg        = Unit{"mmHg", mercuryDensity * StandardGravity * 0.001, "millimetre of mercury, conventional"}
	InHg        = Unit{"inHg", mercuryDensity * StandardGravity * inchM, "inch of mercury, conventional"}
	InH2O       = Unit{"inH2O", waterDensity * StandardGravity * inchM, "inch of water, conventional (1000 kg/m³)"}
	MmH2O       = Unit{"mmH2O", waterDensity * StandardGravity * 0.001, "millimetre of water, conventional (1000 kg/m³)"}
)

// aliases maps every accepted spelling (lower case, spaces removed) to a unit.
var aliases = map[string]Unit{}

// symbols maps each canonical symbol, spelled exactly, to its unit: how
// most replies and configurations name a unit, found without the case
// folding (and allocation) that aliases needs.
var symbols = map[string]Unit{}

func init() {
	add := func(u Unit, names ...string) {
		for _, n := range append(names, u.Symbol) {
			aliases[normalise(n)] = u
		}
		symbols[u.Symbol] = u
	}
	add(Pascal, "pascal", "pascals")
	add(Hectopascal, "hectopascal")
	add(Kilopascal, "kilopascal")
	add(Megapascal, "megapascal")
	add(Bar, "bars")
	add(Millibar, "millibars")
	add(PSI, "lbf/in2", "lbf/in²") // psig and psia carry a mode (mode.go)
	add(KgfPerCm2, "kgf/cm2", "kg/cm2", "kg/cm²", "at")
	add(Atmosphere, "atmosphere")
	add(Torr)
	add(MmHg, "mm hg")
	add(InHg, "in hg")
	add(InH2O, "inh₂o", "inwc", "in wc")
	add(MmH2O, "mmh₂o", "mmwc", "mm wc")
}

func normalise(s string) string {
	s = strings.ToLower(strings.TrimSpace(s))
	return strings.Map(func(r rune) rune {
		if unicode.IsSpace(r) {
			return -1
		}
		return r
	}, s)
}

// Lookup finds a unit by symbol or common spelling. Case is ignored except
// where it is a prefix: "m" is milli and "M" mega, so "mPa" (a millipascal,
// which plateau does not accept) is never taken for MPa, nor "Mbar" for mbar.
// All capitals ("MBAR", "KPA") are read as the one unit they can mean.
func Lookup(name string) (Unit, error) {
	u, _, ok := splitMode(name)
	switch {
	case !ok:
		return Unit{}, fmt.Errorf("unknown pressure unit %q (known: %s)", name, strings.Join(Symbols(), ", "))
	case prefixClash(name, u):
		return Unit{}, fmt.Errorf("pressure unit %q: m is milli and M is mega; plateau knows %q (%s) but not %q",
			name, u.Symbol, u.Name, strings.TrimSpace(name))
	}
	return u, nil
}

// Find is Lookup without the error, for a driver that checks every reply's
// unit and must not build a message for each one that is no unit at all.
func Find(name string) (Unit, bool) {
	if u, ok := symbols[name]; ok {
		return u, true
	}
	u, _, ok := splitMode(name)
	if !ok || prefixClash(name, u) {
		return Unit{}, false
	}
	return u, true
}

// prefixClash: name matched u only by ignoring the case of a leading m or M
// ("mPa" matched MPa).
func prefixClash(name string, u Unit) bool {
	t := strings.TrimSpace(name)
	return t != "" && (t[0] == 'm' || t[0] == 'M') && t[0] != u.Symbol[0] && t != strings.ToUpper(t)
}

// Symbols lists the canonical symbols, sorted, for messages and help.
func Symbols() []string {
	seen := map[string]bool{}
	var out []string
	for _, u := range aliases {
		if !seen[u.Symbol] {
			seen[u.Symbol] = true
			out = append(out, u.Symbol)
		}
	}
	sort.Strings(out)
	return out
}

// Quantity is a number with what it is measured in: a pressure unit or a percentage.
type Quantity struct {
	Value   float64
	Unit    Unit // zero Unit when Percent is true
	Percent bool
}

// Pa returns the quantity in pascal. It is an error to ask for a percentage.
func (q Quantity) Pa() (float64, error) {
	if q.Percent {
		return 0, fmt.Errorf("%g %% is a percentage, not a pressure", q.Value)
	}
	return q.Unit.ToPa(q.Value), nil
}

func (q Quantity) String() string {
	if q.Percent {
		return strconv.FormatFloat(q.Value, 'g', -1, 64) + " %"
	}
	return strconv.FormatFloat(q.Value, 'g', -1, 64) + " " + q.Unit.Symbol
}

// ParseQuantity reads text such as "16 bar", "-0.5kPa", "1e3 Pa" or "0.25 %".
// A bare number is an error: every quantity in a config must say its unit.
func ParseQuantity(s string) (Quantity, error) {
	t := strings.TrimSpace(s)
	if t == "" {
		return Quantity{}, fmt.Errorf("empty quantity: give a number and a unit such as \"16 bar\"")
	}
	i := numberPrefix(t)
	if i == 0 {
		return Quantity{}, fmt.Errorf("quantity %q does not start with a number", s)
	}
	v, err := strconv.ParseFloat(t[:i], 64)
	if err != nil {
		return Quantity{}, fmt.Errorf("quantity %q: bad number %q", s, t[:i])
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return Quantity{}, fmt.Errorf("quantity %q is not a finite number", s)
	}
	rest := strings.TrimSpace(t[i:])
	switch {
	case rest == "":
		return Quantity{}, fmt.Errorf("quantity %q has no unit: write e.g. \"%s bar\" or \"%s %%\"", s, t, t)
	case rest == "%":
		return Quantity{Value: v, Percent: true}, nil
	}
	u, err := Lookup(rest)
	if err != nil {
		return Quantity{}, fmt.Errorf("quantity %q: %w", s, err)
	}
	return Quantity{Value: v, Unit: u}, nil
}

// numberPrefix returns the length of the leading decimal number in s
// (sign, digits, point, exponent), or 0 if there is none.
func numberPrefix(s string) int {
	i := 0
	if i < len(s) && (s[i] == '+' || s[i] == '-') {
		i++
	}
	digits := 0
	for i < len(s) && s[i] >= '0' && s[i] <= '9' {
		i++
		digits++
	}
	if i < len(s) && s[i] == '.' {
		i++
		for i < len(s) && s[i] >= '0' && s[i] <= '9' {
			i++
			digits++
		}
	}
	if digits == 0 {
		return 0
	}
	if i < len(s) && (s[i] == 'e' || s[i] == 'E') {
		j := i + 1
		if j < len(s) && (s[j] == '+' || s[j] == '-') {
			j++
		}
		k := j
		for k < len(s) && s[k] >= '0' && s[k] <= '9' {
			k++
		}
		if k > j {
			i = k
		}
	}
	return i
}
