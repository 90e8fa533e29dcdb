package units

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// AmbientKind is what an ambient instrument measures.
type AmbientKind string

const (
	Temperature AmbientKind = "temperature" // air temperature; base unit °C
	Humidity    AmbientKind = "humidity"    // relative humidity; base unit %RH
	Barometric  AmbientKind = "barometric"  // absolute pressure of the air; base unit Pa
)

// AmbientKinds lists the kinds a configuration may name.
func AmbientKinds() []string {
	return []string{string(Temperature), string(Humidity), string(Barometric)}
}

// AmbientUnit reads an ambient value in its own unit into the kind's base
// unit (°C, %RH or Pa) and back.
type AmbientUnit struct {
	Kind   AmbientKind
	Symbol string
	scale  float64 // base = v·scale + offset
	offset float64
}

// ToBase converts a value in this unit to the base unit of its kind.
func (u AmbientUnit) ToBase(v float64) float64 { return v*u.scale + u.offset }

// FromBase converts a value in the base unit to this unit.
func (u AmbientUnit) FromBase(b float64) float64 { return (b - u.offset) / u.scale }

// BaseSymbol is the symbol of the kind's base unit.
func (k AmbientKind) BaseSymbol() string {
	switch k {
	case Temperature:
		return "°C"
	case Humidity:
		return "%RH"
	}
	return "Pa"
}

// Temperature units: the kelvin offset is exact by definition of the
// Celsius scale, the Fahrenheit scale 5/9 K per °F from 32 °F at 0 °C
// (NIST SP 811 (2008) B.8, exact).
var (
	celsius    = AmbientUnit{Temperature, "°C", 1, 0}
	kelvin     = AmbientUnit{Temperature, "K", 1, -273.15}
	fahrenheit = AmbientUnit{Temperature, "°F", 5.0 / 9, -32 * 5.0 / 9}
	relHum     = AmbientUnit{Humidity, "%RH", 1, 0}
)

var ambientAliases = map[string]AmbientUnit{
	"°c": celsius, "degc": celsius, "c": celsius, "celsius": celsius, "℃": celsius,
	"k": kelvin, "kelvin": kelvin,
	"°f": fahrenheit, "degf": fahrenheit, "f": fahrenheit, "fahrenheit": fahrenheit, "℉": fahrenheit,
	"%rh": relHum, "%": relHum, "rh": relHum, "%r.h.": relHum,
}

// LookupAmbient finds the unit of an ambient value of kind k: a
// temperature in °C, K or °F; a humidity in %RH; a barometric pressure
// in any pressure unit (Lookup).
func LookupAmbient(k AmbientKind, name string) (AmbientUnit, error) {
	switch k {
	case Barometric:
		u, err := Lookup(name)
		if err != nil {
			return AmbientUnit{}, err
		}
		if m := ModeOf(name); m == Gauge {
			return AmbientUnit{}, fmt.Errorf("unit %q: a barometer reads absolute pressure, not gauge", name)
		}
		return AmbientUnit{Barometric, u.Symbol, u.Pa, 0}, nil
	case Temperature, Humidity:
		if u, ok := ambientAliases[normalise(name)]; ok && u.Kind == k {
			return u, nil
		}
		known := "°C, K, °F"
		if k == Humidity {
			known = "%RH"
		}
		return AmbientUnit{}, fmt.Errorf("unknown %s unit %q (known: %s)", k, name, known)
	}
	return AmbientUnit{}, fmt.Errorf("unknown ambient quantity %q (one of %s)", k, strings.Join(AmbientKinds(), ", "))
}

// Interval is a range of an ambient quantity in its base unit, as the
// reference conditions of a device give it.
type Interval struct {
	Low     float64 `json:"low"`
	High    float64 `json:"high"`
	Nominal float64 `json:"nominal"` // the middle of a "20 ± 2 °C" range; the midpoint of "18 … 22 °C"
	Text    string  `json:"text"`    // as configured, for messages and reports
}

// Holds says whether v lies within the interval (ends included, to the
// last part in 10¹² so that unit conversion does not move a value on an end out).
func (r Interval) Holds(v float64) bool {
	tol := 1e-12 * math.Max(math.Abs(r.Low), math.Abs(r.High))
	return v >= r.Low-tol && v <= r.High+tol
}

// ParseInterval reads reference conditions of kind k: "20 ± 2 °C" (also
// "20 +- 2 °C", "20 +/- 2 °C") or "18 … 22 °C" (also "18 .. 22 °C",
// "18 to 22 °C"), the unit once at the end.
func ParseInterval(k AmbientKind, s string) (Interval, error) {
	t := strings.TrimSpace(s)
	for _, pm := range []string{"±", "+/-", "+-"} {
		if a, b, ok := strings.Cut(t, pm); ok {
			nom, err := strconv.ParseFloat(strings.TrimSpace(a), 64)
			if err != nil {
				return Interval{}, fmt.Errorf("%q: %q is not a number", s, strings.TrimSpace(a))
			}
			half, u, err := valueUnit(k, s, b)
			if err != nil {
				return Interval{}, err
			}
			if half < 0 {
				return Interval{}, fmt.Errorf("%q: the half-width cannot be negative", s)
			}
			return interval(s, u.ToBase(nom-half), u.ToBase(nom+half), u.ToBase(nom))
		}
	}
	for _, sep := range []string{"…", "...", "..", " to "} {
		if a, b, ok := strings.Cut(t, sep); ok {
			lo, err := strconv.ParseFloat(strings.TrimSpace(a), 64)
			if err != nil {
				return Interval{}, fmt.Errorf("%q: %q is not a number", s, strings.TrimSpace(a))
			}
			hi, u, err := valueUnit(k, s, b)
			if err != nil {
				return Interval{}, err
			}
			if hi < lo {
				return Interval{}, fmt.Errorf("%q: the upper end is below the lower", s)
			}
			return interval(s, u.ToBase(lo), u.ToBase(hi), u.ToBase((lo+hi)/2))
		}
	}
	return Interval{}, fmt.Errorf("%q: write reference conditions as \"20 ± 2 °C\" or \"18 … 22 °C\"", s)
}

func interval(s string, lo, hi, nom float64) (Interval, error) {
	for _, v := range []float64{lo, hi, nom} {
		if math.IsNaN(v) || math.IsInf(v, 0) || math.Abs(v) > 1e12 {
			return Interval{}, fmt.Errorf("%q is not a finite range", s)
		}
	}
	return Interval{Low: lo, High: hi, Nominal: nom, Text: strings.TrimSpace(s)}, nil
}

// valueUnit reads "2 °C": a number and the unit of kind k.
func valueUnit(k AmbientKind, whole, s string) (float64, AmbientUnit, error) {
	s = strings.TrimSpace(s)
	i := numberPrefix(s)
	if i == 0 {
		return 0, AmbientUnit{}, fmt.Errorf("%q: %q does not start with a number", whole, s)
	}
	v, err := strconv.ParseFloat(s[:i], 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, AmbientUnit{}, fmt.Errorf("%q: bad number %q", whole, s[:i])
	}
	rest := strings.TrimSpace(s[i:])
	if rest == "" {
		return 0, AmbientUnit{}, fmt.Errorf("%q has no unit: write e.g. \"20 ± 2 %s\"", whole, k.BaseSymbol())
	}
	u, err := LookupAmbient(k, rest)
	if err != nil {
		return 0, AmbientUnit{}, fmt.Errorf("%q: %w", whole, err)
	}
	return v, u, nil
}

// ParseDifference reads a difference of kind k such as "0.2 K", "0.4 °F"
// or "0.3 hPa" (an uncertainty) into the base unit: a temperature
// difference has no offset, so 1 °C and 1 K are the same.
func ParseDifference(k AmbientKind, s string) (float64, error) {
	v, u, err := valueUnit(k, s, s)
	if err != nil {
		return 0, err
	}
	if v < 0 {
		return 0, fmt.Errorf("%q cannot be negative", s)
	}
	return v * u.scale, nil
}
