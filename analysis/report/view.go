package report

import (
	"plateau/analysis"
)

// pointRow is one point of the table as printed, shared by Text and HTML.
type pointRow struct {
	Index, Nominal, Reference, DUT, Error, ErrorPct, Hysteresis, Repeatability, U, MPE, TUR, Decision string
	Outcome                                                                                           analysis.Outcome
}

func (n numbers) rows(res analysis.Result) []pointRow {
	out := make([]pointRow, len(res.Points))
	for i, p := range res.Points {
		out[i] = pointRow{
			Index: itoa(p.Index + 1), Nominal: n.p(p.NominalPa), Reference: n.p(p.ReferenceMeanPa), DUT: n.p(p.DUTMeanPa),
			Error: n.p(p.MeanErrorPa), ErrorPct: pct(p.ErrorPercentSpan), Hysteresis: n.p(p.HysteresisPa),
			Repeatability: n.p(p.RepeatabilityPa), U: n.p(p.ExpandedUncertaintyPa), MPE: n.p(p.MPEPa),
			TUR: tur(p.TUR), Decision: outcomeText(p.Decision), Outcome: p.Decision,
		}
	}
	return out
}

// summaryLine is one labelled figure of the summary block.
type summaryLine struct{ Label, Value string }

func (n numbers) summary(res analysis.Result) []summaryLine {
	s := []summaryLine{
		{"Largest |error|", n.pu(res.MaxAbsErrorPa)},
		{"Largest |error| + U", n.pu(res.MaxErrorSpanPa) + " (" + pct(res.MaxErrorSpanPercentSpan) + " of span)"},
		{"Largest hysteresis", n.pu(res.MaxHysteresisPa)},
		{"Largest repeatability", n.pu(res.MaxRepeatabilityPa)},
		{"Zero deviation", n.pu(res.Zero.DeviationPa) + " (from " + res.Zero.Source + ")"},
	}
	for _, l := range res.Linearity {
		s = append(s, summaryLine{"Linearity, " + string(l.Kind), n.pu(l.MaxDeviationPa) + " (" + pct(l.MaxDeviationPercentSpan) + " of span)"})
	}
	if res.Drift != nil {
		s = append(s, summaryLine{"Largest change between cycles", n.pu(res.Drift.LargestCycleChangePa)})
	}
	s = append(s,
		summaryLine{"Smallest TUR", tur(res.MinTUR)},
		summaryLine{"Coverage factor", "k = " + ftoa(res.CoverageFactor)},
		summaryLine{"Decision rule", ruleText(res.DecisionRule)},
	)
	return s
}

// identityLine is one labelled line of the identity block.
type identityLine struct{ Label, Value string }

func (n numbers) identity(info Info, res analysis.Result) []identityLine {
	d, r := info.Device, info.Reference
	lines := []identityLine{
		{"Run", dash(joinNonEmpty(" · ", info.Run.Label, info.Run.ID))},
		{"Device under test", dash(joinNonEmpty(" · ", d.ID, joinNonEmpty(" ", d.Manufacturer, d.Model), prefixed("serial ", d.Serial)))},
		{"Range", n.pu(res.Device.LowerPa) + " … " + n.pu(res.Device.UpperPa) + ", resolution " + n.pu(res.Device.ResolutionPa)},
		{"Permissible error", n.accuracy(res.Device.Accuracy)},
		{"Reference standard", dash(joinNonEmpty(" · ", r.ID, r.Model, prefixed("serial ", r.Serial)))},
		{"Certificate", dash(r.Certificate) + ", valid until " + date(r.Expires)},
		{"Reference uncertainty", n.refUncertainty(res.Reference)},
	}
	if res.HeadCorrectionPa != 0 {
		lines = append(lines, identityLine{"Head correction", n.pu(res.HeadCorrectionPa) + " added to every reference reading"})
	}
	for _, c := range info.Conditions {
		lines = append(lines, identityLine{c.Name, dash(c.Value)})
	}
	lines = append(lines,
		identityLine{"Points", n.plannedPoints(info, res)},
		identityLine{"Cycles", cyclesText(info, res)},
	)
	if info.Procedure.Method != "" {
		lines = append(lines, identityLine{"Method", info.Procedure.Method})
	}
	return append(lines, identityLine{"Generated", stamp(info.GeneratedAt)})
}

func prefixed(prefix, s string) string {
	if s == "" {
		return ""
	}
	return prefix + s
}
