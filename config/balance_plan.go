package config

import (
	"fmt"
	"math"
	"strings"

	"plateau/analysis/balance"
	"plateau/analysis/readout"
	"plateau/analysis/units"
)

// Vent is the planned loading of a point at zero gauge pressure: no weights,
// the balance open to the atmosphere.
const Vent = "vent"

// planTolerance is how far a planned loading's pressure may sit from its
// point, as a share of the smallest device span: our own choice, wide
// enough for local gravity and air buoyancy (a few 0.01 %), narrow enough
// to catch a forgotten or extra piece.
const planTolerance = 0.01

// validatePlan judges balance.loadings: one loading per point of
// procedure.points, in the same order, each of pieces of the mass set and
// with a nominal pressure (at the piston's level, at the run's piston
// temperature or the reference temperature) near its point.
func (c *Config) validatePlan(p *Problems, key string, b *Balance) {
	b.Planned = nil
	if len(b.Loadings) == 0 {
		return
	}
	pr := c.Procedure
	if len(b.Loadings) != len(pr.Points) {
		p.bad(key, fmt.Sprintf("%d loadings", len(b.Loadings)), "needs one loading per point of procedure.points (%d), in the same order; write %s for a point at zero", len(pr.Points), Vent)
		return
	}
	s := b.Setup()
	if s.Validate() != nil {
		return // reported with the section's own keys
	}
	unit, err := units.Lookup(c.Device.Unit)
	if err != nil {
		unit = units.Pascal
	}
	span := math.Inf(1)
	for _, d := range c.Devices {
		span = math.Min(span, d.Device.UpperPa-d.Device.LowerPa)
	}
	planned := make([][]string, len(b.Loadings))
	pointPa := make(map[int]float64, len(pr.PointsPa))
	for j, i := range pr.pointIndex {
		pointPa[i] = pr.PointsPa[j]
	}
	ok := true
	for i, text := range b.Loadings {
		k := fmt.Sprintf("%s[%d]", key, i)
		want, known := pointPa[i]
		if strings.EqualFold(strings.TrimSpace(text), Vent) {
			if known && math.Abs(want) > planTolerance*span {
				p.bad(k, text, "is the loading of procedure.points[%d] = %s: vented, the balance gives zero, not %s", i, pr.Points[i], readout.WithUnit(want, unit, c.Device.ResolutionPa))
				ok = false
			}
			continue
		}
		ids, err := balance.ParseLoading(text)
		if err != nil {
			p.bad(k, text, "%v", err)
			ok = false
			continue
		}
		cond := b.LevelConditions()
		cond.Loaded = ids
		if b.PistonTemperature == nil {
			cond.PistonTempC = s.Piston.RefTempC
		}
		r, err := s.Pressure(cond)
		if err != nil {
			p.bad(k, text, "%v", err)
			ok = false
			continue
		}
		planned[i] = ids
		if known && math.Abs(r.LevelPa-want) > planTolerance*span {
			p.bad(k, text, "gives %s, but procedure.points[%d] is %s: the loading must be within %s of its point (1 %% of the span); check the pieces",
				readout.WithUnit(r.LevelPa, unit, c.Device.ResolutionPa), i, readout.WithUnit(want, unit, c.Device.ResolutionPa),
				readout.WithUnit(planTolerance*span, unit, c.Device.ResolutionPa))
			ok = false
		}
		if sf := c.Safety; sf.Set && r.LevelPa > sf.MaxPressurePa {
			p.bad(k, text, "gives %s, above safety.max_pressure (%s): plateau load would refuse it",
				readout.WithUnit(r.LevelPa, unit, c.Device.ResolutionPa), readout.WithUnit(sf.MaxPressurePa, unit, c.Device.ResolutionPa))
			ok = false
		}
	}
	if ok {
		b.Planned = planned
	}
}

// PlannedLoading is the loading the plan lists for a step whose target is
// targetPa: the pieces' ids joined by + (or Vent), and whether the plan
// lists one.
func (b *Balance) PlannedLoading(pr Procedure, targetPa float64) (string, bool) {
	if b == nil || len(b.Planned) == 0 {
		return "", false
	}
	for j, i := range pr.pointIndex {
		// The step's target is the point's own value, passed through the
		// run unchanged: equal within rounding.
		if i < len(b.Planned) && math.Abs(pr.PointsPa[j]-targetPa) <= 1e-9*math.Max(1, math.Abs(targetPa)) {
			if b.Planned[i] == nil {
				return Vent, true
			}
			return strings.Join(b.Planned[i], "+"), true
		}
	}
	return "", false
}

// PlannedResults are the pressures and budgets of the loadings the
// reference's uncertainty must cover in a run, at the balance's reference
// level (the run's head correction adds the head and its own terms): the
// plan's loadings when it lists them, otherwise every loading that holds the
// first piece (the piston, as the mass set lists it first) when the set is
// small enough to try them all, and otherwise the piston alone and every
// piece. A vented point gives no pressure and has none.
func (b *Balance) PlannedResults() ([]balance.Result, error) {
	s := b.Setup()
	var loadings [][]string
	switch {
	case len(b.Planned) > 0:
		for _, ids := range b.Planned {
			if ids != nil {
				loadings = append(loadings, ids)
			}
		}
	case len(s.Pieces) <= maxEveryLoading:
		rest := s.Pieces[1:]
		for set := 0; set < 1<<len(rest); set++ {
			ids := []string{s.Pieces[0].ID}
			for i, pc := range rest {
				if set&(1<<i) != 0 {
					ids = append(ids, pc.ID)
				}
			}
			loadings = append(loadings, ids)
		}
	default:
		all := make([]string, len(s.Pieces))
		for i, pc := range s.Pieces {
			all[i] = pc.ID
		}
		loadings = [][]string{all[:1], all}
	}
	out := make([]balance.Result, 0, len(loadings))
	for _, ids := range loadings {
		cond := b.LevelConditions()
		cond.Loaded = ids
		if b.PistonTemperature == nil {
			cond.PistonTempC = s.Piston.RefTempC
		}
		r, err := s.Pressure(cond)
		if err != nil {
			return nil, fmt.Errorf("loading %s: %w", strings.Join(ids, "+"), err)
		}
		out = append(out, r)
	}
	return out, nil
}

// maxEveryLoading bounds the mass sets whose every loading is tried: 2¹¹
// loadings of a dozen pieces take a few milliseconds.
const maxEveryLoading = 12
