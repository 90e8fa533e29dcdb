package units

import (
	"fmt"
	"strings"
)

// Mode says what a pressure is measured against: the surrounding
// atmosphere (gauge) or vacuum (absolute). p_abs = p_gauge + p_baro.
type Mode string

const (
	ModeUnset Mode = ""         // the spelling says nothing about the mode
	Gauge     Mode = "gauge"    // against the atmosphere
	Absolute  Mode = "absolute" // against vacuum
)

// Modes lists the modes a configuration may name.
func Modes() []string { return []string{string(Gauge), string(Absolute)} }

// modeSuffixes are the endings that carry a mode, longest first so that
// "(abs)" is not read as "(ab" + "s)". The trade writes psig/psia,
// bar(g)/bar(a), barg/bara and kPaA (common practice).
var modeSuffixes = []struct {
	suffix string
	mode   Mode
}{
	{"(gauge)", Gauge}, {"(abs)", Absolute}, {"gauge", Gauge}, {"abs", Absolute},
	{"(g)", Gauge}, {"(a)", Absolute}, {"g", Gauge}, {"a", Absolute},
}

// splitMode finds the unit and the mode a spelling carries. A spelling
// that is a unit as it stands (Pa, mmHg) carries no mode.
func splitMode(name string) (Unit, Mode, bool) {
	n := normalise(name)
	if u, ok := aliases[n]; ok {
		return u, ModeUnset, true
	}
	for _, s := range modeSuffixes {
		base, found := strings.CutSuffix(n, s.suffix)
		if !found || base == "" {
			continue
		}
		if u, ok := aliases[base]; ok {
			return u, s.mode, true
		}
	}
	return Unit{}, ModeUnset, false
}

// ModeOf is the mode a unit spelling carries ("psig" gauge, "bar(a)"
// absolute), or ModeUnset when it carries none or is not a pressure unit.
func ModeOf(name string) Mode {
	_, m, _ := splitMode(name)
	return m
}

// LookupMode is Lookup that also returns the mode the spelling carries.
func LookupMode(name string) (Unit, Mode, error) {
	u, err := Lookup(name)
	if err != nil {
		return Unit{}, ModeUnset, err
	}
	return u, ModeOf(name), nil
}

// ParseMode reads a configured mode: "gauge" or "absolute" (also "g",
// "a", "abs"); "" is ModeUnset.
func ParseMode(s string) (Mode, error) {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "":
		return ModeUnset, nil
	case "gauge", "g":
		return Gauge, nil
	case "absolute", "abs", "a":
		return Absolute, nil
	}
	return ModeUnset, fmt.Errorf("mode %q: must be gauge or absolute", s)
}

// ModeIn is the mode the unit of a quantity ("16 bar(a)") or a unit
// alone ("psig") carries.
func ModeIn(s string) Mode {
	t := strings.TrimSpace(s)
	return ModeOf(strings.TrimSpace(t[numberPrefix(t):]))
}
