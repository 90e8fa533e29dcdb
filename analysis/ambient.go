package analysis

import (
	"fmt"
	"math"
	"strconv"

	"plateau/analysis/units"
)

// AmbientMean is one ambient quantity over the window of a point: its
// mean, least and greatest sample, in the quantity's base unit (°C, %RH,
// Pa).
type AmbientMean struct {
	Instrument string            `json:"instrument"`
	Kind       units.AmbientKind `json:"quantity"`
	Mean       float64           `json:"mean"`
	Min        float64           `json:"min"`
	Max        float64           `json:"max"`
	Count      int               `json:"count"`
}

// Conditions are the reference conditions of a device: the ambient
// ranges its specification holds in (base units); nil means not given.
type Conditions struct {
	TemperatureC *units.Interval `json:"temperature_c,omitempty"`
	HumidityPct  *units.Interval `json:"humidity_percent_rh,omitempty"`
	BarometricPa *units.Interval `json:"barometric_pa,omitempty"`
}

func (c *Conditions) of(k units.AmbientKind) *units.Interval {
	if c == nil {
		return nil
	}
	switch k {
	case units.Temperature:
		return c.TemperatureC
	case units.Humidity:
		return c.HumidityPct
	case units.Barometric:
		return c.BarometricPa
	}
	return nil
}

// Barometer describes the barometer that converted the reference's
// readings between gauge and absolute pressure (p_abs = p_gauge + p_baro),
// sample by sample; its uncertainty enters every point's budget.
type Barometer struct {
	Instrument string  `json:"instrument"`
	ExpandedPa float64 `json:"expanded_uncertainty_pa"` // U of one reading
	K          float64 `json:"k"`                       // its coverage factor; 0 means 2
	From       string  `json:"from_mode"`               // the reference's own mode
	To         string  `json:"to_mode"`                 // the device's, which the comparison is in
}

// AmbientRange is an ambient quantity over a set of windows: the mean of
// their means and the least and greatest sample, with the reference
// conditions it is judged against.
type AmbientRange struct {
	Instrument string            `json:"instrument"`
	Kind       units.AmbientKind `json:"quantity"`
	Mean       float64           `json:"mean"`
	Min        float64           `json:"min"`
	Max        float64           `json:"max"`
	Windows    int               `json:"windows"`
	Conditions *units.Interval   `json:"conditions,omitempty"`
	// Outside says some window's mean lay outside the reference conditions.
	Outside bool `json:"outside_conditions,omitempty"`
}

// AmbientPoint is the ambient conditions at one calibration point.
type AmbientPoint struct {
	Index      int            `json:"index"`
	NominalPa  float64        `json:"nominal_pa"`
	Quantities []AmbientRange `json:"quantities"`
}

// AmbientResult is the ambient conditions of a run: per point (in the
// order of Result.Points) and over every captured window of the run.
type AmbientResult struct {
	Points []AmbientPoint `json:"points"`
	Run    []AmbientRange `json:"run"`
}

// validateAmbient refuses ambient means that are no measurement.
func validateAmbient(p Point) error {
	for _, a := range p.Ambient {
		if !finite(a.Mean) || !finite(a.Min) || !finite(a.Max) || math.Abs(a.Mean) > maxPressurePa || a.Count < 1 || a.Min > a.Max {
			return fmt.Errorf("ambient %s (%s): mean %g, range %g … %g over %d samples is not a measurement", a.Kind, a.Instrument, a.Mean, a.Min, a.Max, a.Count)
		}
	}
	return nil
}

// temperatureOf is the ambient temperature over a point's window.
func temperatureOf(p Point) (float64, bool) {
	for _, a := range p.Ambient {
		if a.Kind == units.Temperature {
			return a.Mean, true
		}
	}
	return 0, false
}

// accumulate folds window means into ranges, one per quantity in the
// order first seen.
type accumulate struct {
	ranges []AmbientRange
	sums   []float64
}

func (acc *accumulate) add(a AmbientMean, cond *Conditions) {
	for i := range acc.ranges {
		r := &acc.ranges[i]
		if r.Kind == a.Kind && r.Instrument == a.Instrument {
			r.Min, r.Max = math.Min(r.Min, a.Min), math.Max(r.Max, a.Max)
			r.Windows++
			acc.sums[i] += a.Mean
			r.Mean = acc.sums[i] / float64(r.Windows)
			r.Outside = r.Outside || (r.Conditions != nil && !r.Conditions.Holds(a.Mean))
			return
		}
	}
	c := cond.of(a.Kind)
	acc.ranges = append(acc.ranges, AmbientRange{Instrument: a.Instrument, Kind: a.Kind, Mean: a.Mean, Min: a.Min, Max: a.Max, Windows: 1,
		Conditions: c, Outside: c != nil && !c.Holds(a.Mean)})
	acc.sums = append(acc.sums, a.Mean)
}

// ambientSummary gathers the ambient means of the points by calibration
// point and over the run, and warns of every window whose mean lies
// outside the device's reference conditions. nil when no point has any.
func ambientSummary(points []Point, res Result) (*AmbientResult, []string) {
	var run accumulate
	byIndex := map[int]*accumulate{}
	var warnings []string
	cond := res.Device.Conditions
	for i, p := range points {
		for _, a := range p.Ambient {
			run.add(a, cond)
			if p.Kind == Measurement {
				if byIndex[p.Index] == nil {
					byIndex[p.Index] = &accumulate{}
				}
				byIndex[p.Index].add(a, cond)
			}
			if c := cond.of(a.Kind); c != nil && !c.Holds(a.Mean) {
				warnings = append(warnings, fmt.Sprintf("%s: ambient %s %s is outside the reference conditions %s",
					describe(i, p), a.Kind, AmbientText(a.Kind, a.Mean), c.Text))
			}
		}
	}
	if len(run.ranges) == 0 {
		return nil, nil
	}
	out := &AmbientResult{Run: run.ranges}
	for _, pr := range res.Points {
		ap := AmbientPoint{Index: pr.Index, NominalPa: pr.NominalPa}
		if acc := byIndex[pr.Index]; acc != nil {
			ap.Quantities = acc.ranges
		}
		out.Points = append(out.Points, ap)
	}
	return out, warnings
}

// AmbientText writes an ambient value in its base unit with the digits
// its sensors usually show (common practice): 0.1 °C, 1 %RH, 0.1 hPa.
func AmbientText(k units.AmbientKind, v float64) string {
	return AmbientNumber(k, v) + " " + AmbientSymbol(k)
}

// AmbientNumber is AmbientText without the unit.
func AmbientNumber(k units.AmbientKind, v float64) string {
	switch k {
	case units.Temperature:
		return strconv.FormatFloat(v, 'f', 2, 64)
	case units.Humidity:
		return strconv.FormatFloat(v, 'f', 1, 64)
	}
	return strconv.FormatFloat(v/100, 'f', 2, 64)
}

// AmbientSymbol is the unit AmbientText writes a quantity in.
func AmbientSymbol(k units.AmbientKind) string {
	if k == units.Barometric {
		return "hPa"
	}
	return k.BaseSymbol()
}

// barometerTerm is the barometer's share of a point's budget when the
// reference was converted between modes: its reading is added to or taken
// from every reference sample, so its uncertainty adds in full (normal,
// divided by its k).
func barometerTerm(ref Reference) Contribution {
	b := ref.Barometer
	switch {
	case b == nil:
		return notEvaluated("barometer", "the reference reads in the device's mode: no conversion")
	case b.ExpandedPa == 0:
		return notEvaluated("barometer", "the barometer converting the reference has no uncertainty configured")
	}
	k := b.K
	if k == 0 {
		k = 2
	}
	return Contribution{Name: "barometer", Evaluated: true, EstimatePa: b.ExpandedPa, Distribution: "normal", Divisor: k, StandardUncertaintyPa: b.ExpandedPa / k}
}

func (b *Barometer) validate() error {
	if b == nil {
		return nil
	}
	if !finite(b.ExpandedPa) || b.ExpandedPa < 0 || !finite(b.K) || b.K < 0 {
		return fmt.Errorf("barometer %s: uncertainty %g Pa with k = %g: must be finite and ≥ 0", b.Instrument, b.ExpandedPa, b.K)
	}
	return nil
}
