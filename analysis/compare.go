package analysis

import (
	"errors"
	"fmt"
	"math"

	"plateau/analysis/units"
)

// Comparison sets an as-left result beside the as-found result of the same
// device, point by point.
type Comparison struct {
	Points          []PointChange `json:"points"`
	AsFoundDecision Outcome       `json:"as_found_decision"`
	AsLeftDecision  Outcome       `json:"as_left_decision"`
	Warnings        []string      `json:"warnings"`
}

// PointChange is the change at one point from as-found to as-left.
type PointChange struct {
	Index              int     `json:"index"`
	NominalPa          float64 `json:"nominal_pa"`
	AsFoundErrorPa     float64 `json:"as_found_error_pa"`
	AsLeftErrorPa      float64 `json:"as_left_error_pa"`
	ErrorChangePa      float64 `json:"error_change_pa"` // as-left − as-found
	AsFoundExpandedPa  float64 `json:"as_found_expanded_uncertainty_pa"`
	AsLeftExpandedPa   float64 `json:"as_left_expanded_uncertainty_pa"`
	AsFoundErrorSpanPa float64 `json:"as_found_error_span_pa"`
	AsLeftErrorSpanPa  float64 `json:"as_left_error_span_pa"`
	AsFoundDecision    Outcome `json:"as_found_decision"`
	AsLeftDecision     Outcome `json:"as_left_decision"`
}

// Compare matches the points of two results by Index. It refuses results of
// different devices (range) and names points found in only one of them.
func Compare(asFound, asLeft Result) (Comparison, error) {
	if len(asFound.Points) == 0 || len(asLeft.Points) == 0 {
		return Comparison{}, errors.New("compare: a result without points")
	}
	if asFound.Device.LowerPa != asLeft.Device.LowerPa || asFound.Device.UpperPa != asLeft.Device.UpperPa {
		return Comparison{}, fmt.Errorf("compare: as-found range %g … %g Pa differs from as-left range %g … %g Pa",
			asFound.Device.LowerPa, asFound.Device.UpperPa, asLeft.Device.LowerPa, asLeft.Device.UpperPa)
	}
	c := Comparison{AsFoundDecision: asFound.Decision, AsLeftDecision: asLeft.Decision, Warnings: []string{}}
	if asFound.DecisionRule != asLeft.DecisionRule {
		c.Warnings = append(c.Warnings, fmt.Sprintf("decision rules differ: as-found %q, as-left %q", asFound.DecisionRule, asLeft.DecisionRule))
	}
	// Messages in the device's unit, points numbered as in the table.
	u, _ := units.Lookup(asLeft.Device.Unit)
	if u.Pa == 0 {
		u = units.Pascal
	}
	say := messages{u, asLeft.Device.ResolutionPa}
	left := map[int]PointResult{}
	for _, p := range asLeft.Points {
		left[p.Index] = p
	}
	for _, f := range asFound.Points {
		l, ok := left[f.Index]
		if !ok {
			c.Warnings = append(c.Warnings, fmt.Sprintf("point %d (%s) has no as-left reading", f.Index+1, say.nominal(f.NominalPa)))
			continue
		}
		delete(left, f.Index)
		if f.NominalPa != l.NominalPa {
			return Comparison{}, fmt.Errorf("compare: point %d is nominal %s as found but %s as left", f.Index+1, say.nominal(f.NominalPa), say.p(l.NominalPa))
		}
		c.Points = append(c.Points, PointChange{
			Index: f.Index, NominalPa: f.NominalPa,
			AsFoundErrorPa: f.MeanErrorPa, AsLeftErrorPa: l.MeanErrorPa, ErrorChangePa: l.MeanErrorPa - f.MeanErrorPa,
			AsFoundExpandedPa: f.ExpandedUncertaintyPa, AsLeftExpandedPa: l.ExpandedUncertaintyPa,
			AsFoundErrorSpanPa: f.ErrorSpanPa, AsLeftErrorSpanPa: l.ErrorSpanPa,
			AsFoundDecision: f.Decision, AsLeftDecision: l.Decision,
		})
	}
	for _, p := range asLeft.Points {
		if _, ok := left[p.Index]; ok {
			c.Warnings = append(c.Warnings, fmt.Sprintf("point %d (%s) has no as-found reading", p.Index+1, say.nominal(p.NominalPa)))
		}
	}
	if len(c.Points) == 0 {
		return Comparison{}, errors.New("compare: the two results share no point")
	}
	return c, nil
}

// LargestChangePa is the largest |as-left − as-found| error change.
func (c Comparison) LargestChangePa() float64 {
	m := 0.0
	for _, p := range c.Points {
		m = math.Max(m, math.Abs(p.ErrorChangePa))
	}
	return m
}
