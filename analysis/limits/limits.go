// Package limits holds the published accuracy classes and grades that set a
// pressure gauge's maximum permissible error, in one place for the analysis
// (which computes the limits) and the configuration (which checks a device's
// class or grade and derives settle defaults from it).
package limits

import (
	"fmt"
	"sort"
	"strconv"
	"strings"
)

// EN837Classes are the accuracy classes of EN 837-1:1996 Table 11; the
// maximum permissible error is the class number in % of span.
var en837Classes = []float64{0.1, 0.25, 0.6, 1, 1.6, 2.5, 4}

// EN837Classes lists the EN 837-1 accuracy classes.
func EN837Classes() []float64 { return append([]float64(nil), en837Classes...) }

// EN837ClassNames lists the classes as they are written on a dial.
func EN837ClassNames() []string {
	out := make([]string, len(en837Classes))
	for i, c := range en837Classes {
		out[i] = strconv.FormatFloat(c, 'g', -1, 64)
	}
	return out
}

// IsEN837Class says whether c is a class of EN 837-1 Table 11.
func IsEN837Class(c float64) bool {
	for _, k := range en837Classes {
		if k == c {
			return true
		}
	}
	return false
}

// ASMEGrade is an ASME B40.100 accuracy grade: the permissible error in % of
// span in the first and last quarter of the scale and in the middle half.
type ASMEGrade struct{ Outer, Middle float64 }

// asmeGrades: 4A, A and D from secondary sources quoting ASME B40.100;
// 3A, 2A, 1A, B and C are from memory, not yet confirmed against the
// standard (REFERENCES.md §2.2).
var asmeGrades = map[string]ASMEGrade{
	"4A": {0.1, 0.1},
	"3A": {0.25, 0.25}, // from memory
	"2A": {0.5, 0.5},   // from memory
	"1A": {1, 1},       // from memory
	"A":  {2, 1},
	"B":  {3, 2}, // from memory
	"C":  {4, 3}, // from memory
	"D":  {5, 5},
}

// Grade looks up an ASME B40.100 grade by name, ignoring case and spaces.
func Grade(name string) (ASMEGrade, error) {
	g, ok := asmeGrades[strings.ToUpper(strings.TrimSpace(name))]
	if !ok {
		return ASMEGrade{}, fmt.Errorf("unknown ASME B40.100 grade %q (known: %s)", name, strings.Join(ASMEGrades(), ", "))
	}
	return g, nil
}

// Tightest is the smaller of the grade's two limits, % of span.
func (g ASMEGrade) Tightest() float64 { return min(g.Outer, g.Middle) }

// ASMEGrades lists the known ASME B40.100 grades, tightest first.
func ASMEGrades() []string {
	out := make([]string, 0, len(asmeGrades))
	for k := range asmeGrades {
		out = append(out, k)
	}
	sort.Slice(out, func(i, j int) bool {
		gi, gj := asmeGrades[out[i]], asmeGrades[out[j]]
		if gi.Outer != gj.Outer {
			return gi.Outer < gj.Outer
		}
		return gi.Middle < gj.Middle
	})
	return out
}
