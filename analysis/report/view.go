package report

import (
	"strconv"
	"strings"

	"plateau/analysis"
)

// pointRow is one point of the table as printed, shared by Text and HTML.
type pointRow struct {
	Index, Nominal, Reference, DUT, Error, ErrorPct, Hysteresis, Repeatability, U, K, Span, MPE string
	RefRatio, ExpRatio, Decision                                                                string
	Outcome                                                                                     analysis.Outcome
}

func (n numbers) rows(res analysis.Result) []pointRow {
	out := make([]pointRow, len(res.Points))
	for i, p := range res.Points {
		u := n.p(p.ExpandedUncertaintyPa)
		if p.MinimumApplied {
			u += "*"
		}
		out[i] = pointRow{
			Index: itoa(p.Index + 1), Nominal: n.p(p.NominalPa), Reference: n.p(p.ReferenceMeanPa), DUT: n.p(p.DUTMeanPa),
			Error: n.p(p.MeanErrorPa), ErrorPct: pct(p.ErrorPercentSpan), Hysteresis: n.pIf(p.HysteresisPa, p.HysteresisEvaluated),
			Repeatability: n.pIf(p.RepeatabilityPa, p.RepeatabilityEvaluated), U: u, K: strconv.FormatFloat(p.CoverageFactor, 'f', 2, 64),
			Span: n.p(p.ErrorSpanPa), MPE: n.p(p.MPEPa),
			RefRatio: ratio(p.ReferenceRatio), ExpRatio: ratio(p.ExpandedRatio), Decision: outcomeText(p.Decision), Outcome: p.Decision,
		}
	}
	return out
}

// judgementRow shows how a point's verdict was reached: each direction's
// worst reading with the U of one reading, and the worst cycle's hysteresis
// against its limit.
type judgementRow struct {
	Index, UpError, UpU, Up, DownError, DownU, Down, Hysteresis, Limit, HystOutcome, Point string
	UpOutcome, DownOutcome, HOutcome, Outcome                                              analysis.Outcome
}

func (n numbers) judgements(res analysis.Result) []judgementRow {
	out := make([]judgementRow, len(res.Points))
	dir := func(d *analysis.DirectionResult) (e, u, o string, oc analysis.Outcome) {
		if d == nil {
			return "—", "—", "not measured", ""
		}
		return n.p(d.WorstErrorPa), n.p(d.ExpandedUncertaintyPa), outcomeText(d.Decision), d.Decision
	}
	for i, p := range res.Points {
		r := judgementRow{Index: itoa(p.Index + 1), Point: outcomeText(p.Decision), Outcome: p.Decision,
			Hysteresis: notEvaluated, Limit: "none", HystOutcome: "not judged", HOutcome: p.HysteresisDecision}
		r.UpError, r.UpU, r.Up, r.UpOutcome = dir(p.UpResult)
		r.DownError, r.DownU, r.Down, r.DownOutcome = dir(p.DownResult)
		if p.HysteresisEvaluated {
			worst := p.HysteresisCycles[0]
			for _, c := range p.HysteresisCycles {
				if c.HysteresisPa > worst.HysteresisPa {
					worst = c
				}
			}
			r.Hysteresis = n.p(worst.HysteresisPa) + " (cycle " + itoa(worst.Cycle) + ")"
		}
		if p.HysteresisLimitPa != nil {
			r.Limit = n.p(*p.HysteresisLimitPa)
			if p.HysteresisDecision != "" {
				r.HystOutcome = outcomeText(p.HysteresisDecision)
			}
		}
		out[i] = r
	}
	return out
}

// summaryLine is one labelled figure of the summary block.
type summaryLine struct{ Label, Value string }

func (n numbers) summary(res analysis.Result) []summaryLine {
	zero := notEvaluated + " (no cycle has a zero reading before and after)"
	if res.Zero.Evaluated {
		zero = n.pu(res.Zero.DeviationPa) + " (from " + res.Zero.Source + ")"
	}
	hyst, repeat := false, false
	for _, p := range res.Points {
		hyst, repeat = hyst || p.HysteresisEvaluated, repeat || p.RepeatabilityEvaluated
	}
	s := []summaryLine{
		{"Mean error", meanText},
		{"Largest |error|", n.pu(res.MaxAbsErrorPa)},
		{"Largest |error| + U", n.pu(res.MaxErrorSpanPa) + " (" + pct(res.MaxErrorSpanPercentSpan) + " of span; the error span, for users who do not correct)"},
		{"Largest hysteresis", n.puIf(res.MaxHysteresisPa, hyst)},
		{"Largest repeatability", n.puIf(res.MaxRepeatabilityPa, repeat)},
		{"Zero deviation", zero},
	}
	if len(res.Linearity) == 0 {
		s = append(s, summaryLine{"Linearity", notEvaluated + " (fewer than three points)"})
	}
	for _, l := range res.Linearity {
		s = append(s, summaryLine{"Linearity, " + string(l.Kind), n.pu(l.MaxDeviationPa) + " (" + pct(l.MaxDeviationPercentSpan) + " of span)"})
	}
	if res.Drift != nil {
		s = append(s, summaryLine{"Largest change between cycles", n.pu(res.Drift.LargestCycleChangePa)})
	}
	if res.ShortProcedure {
		s = append(s, summaryLine{"Short procedure", "U raised to at least " + n.pu(res.MinimumUncertaintyPa) +
			" (0.2 % of span, EURAMET cg-17 basic procedure; marked * in the table)"})
	}
	s = append(s,
		summaryLine{"Smallest MPE / U of the reference", ratio(res.MinReferenceRatio) + " (the 4 : 1 practice compares the reference standard alone)"},
		summaryLine{"Smallest MPE / U", ratio(res.MinExpandedRatio) + " (U of the whole measurement at the point)"},
		summaryLine{"Coverage", res.Coverage.Statement},
		summaryLine{"Decision rule", ruleText(res.DecisionRule)},
		summaryLine{"Judged", judgementText},
		summaryLine{"Ties", res.TieRule},
	)
	return s
}

// curveLines describe the correction curve with its coefficients in the
// display unit: p = Σ a_j·x^j with x and p in that unit.
func (n numbers) curveLines(res analysis.Result) []summaryLine {
	c := res.Correction
	if c == nil {
		return nil
	}
	f := n.u.Pa
	var out []summaryLine
	for j, a := range c.PowerCoefficients {
		scale := 1.0
		for range j - 1 {
			scale *= f
		}
		if j == 0 {
			scale = 1 / f
		}
		unit := n.u.Symbol
		switch {
		case j == 1:
			unit = ""
		case j > 1:
			unit = n.u.Symbol + "^" + itoa(1-j)
		}
		with := func(v float64, digits int) string {
			return strings.TrimSpace(strconv.FormatFloat(v, 'g', digits, 64) + " " + unit)
		}
		v := with(a*scale, 8)
		if c.CoefficientSD != nil {
			v += ", standard uncertainty " + with(c.CoefficientSD[j]*scale, 3)
		}
		out = append(out, summaryLine{"a" + itoa(j), v})
	}
	if c.Correlation != nil {
		var rs []string
		for i := range c.Correlation {
			for j := i + 1; j < len(c.Correlation); j++ {
				rs = append(rs, "r(a"+itoa(i)+", a"+itoa(j)+") = "+strconv.FormatFloat(c.Correlation[i][j], 'f', 4, 64))
			}
		}
		out = append(out, summaryLine{"Correlation", strings.Join(rs, ", ")})
	}
	interp := notEvaluated + " (the curve passes through every point by construction)"
	if c.InterpolationEvaluated {
		fine := numbers{u: n.u, decimals: n.decimals + 2}
		interp = fine.pu(c.InterpolationPa) + " (largest residual " + fine.pu(c.MaxResidualPa) + " as a rectangular half-width)"
	}
	return append(out, summaryLine{"Interpolation u", interp})
}

// identityLine is one labelled line of the identity block.
type identityLine struct{ Label, Value string }

func (n numbers) identity(info Info, res analysis.Result) []identityLine {
	d, r := info.Device, info.Reference
	var lines identityLines
	lines.add("Run", joinNonEmpty(" · ", info.Run.Label, info.Run.ID))
	lines = append(lines, n.runState(info.Run)...)
	lines = append(lines, info.Certificate.lines()...)
	lines.add("Device under test", identityText(d))
	lines.add("Range", n.pu(res.Device.LowerPa)+" … "+n.pu(res.Device.UpperPa)+", resolution "+n.pu(res.Device.ResolutionPa))
	lines.add("Permissible error", n.accuracy(res.Device.Accuracy))
	lines.add("Reference standard", joinNonEmpty(" · ", r.ID, r.Model, prefixed("serial ", r.Serial), r.Kind))
	lines.add("Reference certificate", joinNonEmpty(", ", r.Certificate, prefixed("valid until ", date(r.Expires))))
	lines.add("Reference uncertainty", n.refUncertainty(res.Reference))
	switch {
	case res.HeadVaries:
		lines.add("Head correction", "gas medium: density at each reading's absolute pressure, added to every reference reading")
	case res.HeadCorrectionPa != 0:
		lines.add("Head correction", n.pu(res.HeadCorrectionPa)+" added to every reference reading")
	case r.Kind == KindBalance:
		lines.add("Head correction", headInBalanceText)
	}
	for _, c := range info.Conditions {
		lines.add(c.Name, c.Value)
	}
	lines.add("Points", n.plannedPoints(info, res))
	lines.add("Cycles", cyclesText(info, res))
	lines.add("Method", info.Procedure.Method)
	lines.add("Generated", stamp(info.GeneratedAt))
	return lines
}

// identityLines are the labelled lines of an identity block; a field
// with nothing to say is left out, never printed as a dash.
type identityLines []identityLine

func (ls *identityLines) add(label, value string) {
	if strings.TrimSpace(value) != "" {
		*ls = append(*ls, identityLine{label, value})
	}
}

// headInBalanceText says where the head correction of a pressure balance
// reference is: its pressures are worked out at the device's height.
const headInBalanceText = "in the pressure balance's budget: each loading's pressure is worked out at the device's height"

// headInBalance says whether c is a head line that was not evaluated
// because the pressure balance's budget holds it.
func headInBalance(info Info, c analysis.Contribution) bool {
	return info.Reference.Kind == KindBalance && !c.Evaluated && (c.Name == "head_height" || c.Name == "head_density")
}

func prefixed(prefix, s string) string {
	if s == "" {
		return ""
	}
	return prefix + s
}

// budgetTable is the budget as rows of contributions by columns of points:
// standard uncertainties, "not evaluated" where a term could not be.
func (n numbers) budgetTable(info Info, res analysis.Result) [][]string {
	if len(res.Points) == 0 {
		return nil
	}
	fine := numbers{u: n.u, decimals: n.decimals + 2}
	head := []string{"contribution"}
	for _, p := range res.Points {
		head = append(head, "#"+itoa(p.Index+1))
	}
	out := [][]string{head}
	for i, c := range res.Points[0].Budget {
		row := []string{contributionText(c.Name)}
		for _, p := range res.Points {
			switch {
			case i < len(p.Budget) && p.Budget[i].Evaluated:
				row = append(row, fine.p(p.Budget[i].StandardUncertaintyPa))
			case i < len(p.Budget) && headInBalance(info, p.Budget[i]):
				row = append(row, "in the balance")
			default:
				row = append(row, notEvaluated)
			}
		}
		out = append(out, row)
	}
	uc, u, k := []string{"combined u_c"}, []string{"expanded U"}, []string{"coverage factor k"}
	for _, p := range res.Points {
		uc = append(uc, fine.p(p.CombinedUncertaintyPa))
		u = append(u, fine.p(p.ExpandedUncertaintyPa))
		k = append(k, strconv.FormatFloat(p.CoverageFactor, 'f', 2, 64))
	}
	out = append(out, uc, u, k)
	if res.Coverage.Method == analysis.CoverageStudentT {
		nu := []string{"ν_eff"}
		for _, p := range res.Points {
			if p.EffectiveDOF == nil {
				nu = append(nu, "∞")
			} else {
				nu = append(nu, strconv.FormatFloat(*p.EffectiveDOF, 'f', 1, 64))
			}
		}
		out = append(out, nu)
	}
	return out
}

// notEvaluatedReasons says once per budget line why it was not evaluated,
// naming the points (as numbered in the table) when not all of them.
func notEvaluatedReasons(info Info, res analysis.Result) []string {
	var order []string
	why := map[string]string{}
	at := map[string][]string{}
	for _, p := range res.Points {
		for _, c := range p.Budget {
			if c.Evaluated {
				continue
			}
			if _, ok := why[c.Name]; !ok {
				order = append(order, c.Name)
				why[c.Name] = c.Note
				if headInBalance(info, c) {
					why[c.Name] = headInBalanceText
				}
			}
			at[c.Name] = append(at[c.Name], itoa(p.Index+1))
		}
	}
	out := make([]string, len(order))
	for i, name := range order {
		out[i] = contributionText(name) + " — " + why[name]
		if len(at[name]) < len(res.Points) {
			out[i] += " (points " + strings.Join(at[name], ", ") + ")"
		}
	}
	return out
}

// readingRow is one captured reading, as the table of every reading
// shows it: the point, its cycle and direction, both indications and
// the error of that reading.
type readingRow struct {
	Index, Nominal, Cycle, Direction, Reference, DUT, Error, Time string
}

func (n numbers) readings(res analysis.Result) []readingRow {
	var out []readingRow
	for _, p := range res.Points {
		for _, r := range p.Readings {
			row := readingRow{Index: itoa(p.Index + 1), Nominal: n.p(p.NominalPa), Cycle: itoa(r.Cycle), Direction: dirText(r.Direction),
				Reference: n.p(r.ReferencePa), DUT: n.p(r.DUTPa), Error: n.p(r.ErrorPa)}
			if !r.Time.IsZero() {
				row.Time = r.Time.UTC().Format("2006-01-02 15:04:05")
			}
			out = append(out, row)
		}
	}
	return out
}
