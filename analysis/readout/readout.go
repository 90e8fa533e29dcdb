// Package readout writes pressures the way a person reads them: in fixed
// notation with as many decimals as the instrument's resolution supports,
// never in scientific notation. It is a pure function of value, unit and
// resolution; machine outputs (JSON, CSV) keep full precision elsewhere.
package readout

import (
	"math"
	"strconv"

	"plateau/analysis/units"
)

// maxDecimals caps the decimals of a tiny resolution or value: no gauge
// indicates more than this in any unit we know.
const maxDecimals = 9

// unknownDigits is how many significant digits a value gets when no
// resolution is known (common practice for a display of six digits).
const unknownDigits = 6

// Decimals is how many decimals a reading in unit u shows when the
// instrument resolves resolutionPa: the position of the resolution's first
// significant digit (0.01 bar → 2; 0.145 psi → 1; 1 kPa → 0). A resolution
// of zero or less is unknown and gives -1.
func Decimals(resolutionPa float64, u units.Unit) int {
	if !(resolutionPa > 0) || math.IsInf(resolutionPa, 0) {
		return -1
	}
	r := u.FromPa(resolutionPa)
	// The small tolerance keeps 0.01, stored as 0.01000000000000000020816…,
	// at two decimals.
	d := int(math.Ceil(-math.Log10(r) - 1e-9))
	return min(max(d, 0), maxDecimals)
}

// Pressure is a single reading: pa in unit u with the decimals the
// resolution supports, without the unit symbol.
func Pressure(pa float64, u units.Unit, resolutionPa float64) string {
	return format(u.FromPa(pa), Decimals(resolutionPa, u))
}

// Mean is an average of several readings: one decimal more than a single
// reading, since averaging resolves below the last digit.
func Mean(pa float64, u units.Unit, resolutionPa float64) string {
	d := Decimals(resolutionPa, u)
	if d >= 0 {
		d = min(d+1, maxDecimals)
	}
	return format(u.FromPa(pa), d)
}

// Signed is a difference of means (an error, a drift): like Mean with a sign
// always shown, so "+0.02" and "-0.02" line up in a table.
func Signed(pa float64, u units.Unit, resolutionPa float64) string {
	s := Mean(pa, u, resolutionPa)
	if s != "" && s[0] >= '0' && s[0] <= '9' {
		s = "+" + s
	}
	return s
}

// WithUnit is Pressure followed by the unit's symbol.
func WithUnit(pa float64, u units.Unit, resolutionPa float64) string {
	return Pressure(pa, u, resolutionPa) + " " + u.Symbol
}

// MeanWithUnit is Mean followed by the unit's symbol.
func MeanWithUnit(pa float64, u units.Unit, resolutionPa float64) string {
	return Mean(pa, u, resolutionPa) + " " + u.Symbol
}

// format writes v with d decimals; d < 0 means no resolution is known and
// v keeps unknownDigits significant digits, still in fixed notation.
func format(v float64, d int) string {
	switch {
	case math.IsNaN(v):
		return "not a number"
	case math.IsInf(v, 1):
		return "+infinity"
	case math.IsInf(v, -1):
		return "-infinity"
	}
	if d < 0 {
		d = 0
		if a := math.Abs(v); a > 0 {
			d = min(max(unknownDigits-1-int(math.Floor(math.Log10(a))), 0), maxDecimals)
		}
	}
	s := strconv.FormatFloat(v, 'f', d, 64)
	if isNegativeZero(s) {
		s = s[1:] // "-0.00" reads as a sign that is not there
	}
	return s
}

func isNegativeZero(s string) bool {
	if len(s) < 2 || s[0] != '-' {
		return false
	}
	for _, c := range s[1:] {
		if c != '0' && c != '.' {
			return false
		}
	}
	return true
}

// Plain is a value in its own unit (an instrument's raw reading, a loop
// current) with the decimals of a resolution in that same unit; 0 for an
// unknown resolution.
// Without a resolution it is written exactly as read, in fixed notation:
// a value an instrument sent as a 32-bit float (it widens to a float64
// exactly) gets the shortest digits of that float, so a register holding
// 0.00014 reads "0.00014", not "0.00014000000373926014".
func Plain(v, resolution float64) string {
	if d := Decimals(resolution, units.Pascal); d >= 0 || math.IsNaN(v) || math.IsInf(v, 0) {
		return format(v, d)
	}
	if float64(float32(v)) == v {
		return strconv.FormatFloat(v, 'f', -1, 32)
	}
	return strconv.FormatFloat(v, 'f', -1, 64)
}
