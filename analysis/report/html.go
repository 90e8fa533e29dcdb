package report

import (
	_ "embed"
	"fmt"
	"html/template"
	"io"
	"strconv"

	"plateau/analysis"
)

//go:embed page.html.tmpl
var pageSource string

var page = template.Must(template.New("page").Parse(pageSource))

// budgetLine is one contribution of a point's uncertainty budget, as printed.
type budgetLine struct{ Name, Estimate, Distribution, Divisor, Standard string }

// budgetBlock is one point's budget.
type budgetBlock struct {
	Index, Nominal, Combined, Expanded, K string
	Lines                                 []budgetLine
}

func (n numbers) budgets(res analysis.Result) []budgetBlock {
	out := make([]budgetBlock, len(res.Points))
	for i, p := range res.Points {
		// A budget shows two digits more than the tables: its small terms
		// are what it is read for, and must not print as zero.
		fine := numbers{u: n.u, decimals: n.decimals + 2}
		b := budgetBlock{Index: itoa(p.Index + 1), Nominal: n.pu(p.NominalPa), Combined: fine.pu(p.CombinedUncertaintyPa),
			Expanded: fine.pu(p.ExpandedUncertaintyPa)}
		b.K = strconv.FormatFloat(p.CoverageFactor, 'f', 2, 64)
		if p.EffectiveDOF != nil {
			b.K += ", ν_eff = " + strconv.FormatFloat(*p.EffectiveDOF, 'f', 1, 64)
		}
		if p.MinimumApplied {
			b.Expanded += " (raised to the basic-procedure minimum)"
		}
		for _, c := range p.Budget {
			if !c.Evaluated {
				b.Lines = append(b.Lines, budgetLine{Name: contributionText(c.Name), Estimate: notEvaluated, Distribution: c.Note, Divisor: "", Standard: notEvaluated})
				continue
			}
			b.Lines = append(b.Lines, budgetLine{Name: contributionText(c.Name), Estimate: fine.pu(c.EstimatePa),
				Distribution: c.Distribution, Divisor: fmt.Sprintf("%.4g", c.Divisor), Standard: fine.pu(c.StandardUncertaintyPa)})
		}
		out[i] = b
	}
	return out
}

// HTML writes one self-contained page (inline CSS and SVG, no script, no
// external resource) for printing on A4 or Letter and for archiving.
func HTML(w io.Writer, info Info, res analysis.Result) error {
	n := newNumbers(info.unit(), res.Device.ResolutionPa)
	ch, err := charts(n, res)
	if err != nil {
		return err
	}
	svgs := make([]template.HTML, len(ch))
	for i, c := range ch {
		svgs[i] = template.HTML(c.SVG) // produced by gonum/plot from numbers only, never from user text
	}
	data := struct {
		Title     string
		Unit      string
		Identity  []identityLine
		Rows      []pointRow
		Judged    []judgementRow
		Summary   []summaryLine
		Curve     []summaryLine
		Complete  bool
		Verdict   string
		Outcome   analysis.Outcome
		Rule      string
		Warnings  []string
		Budgets   []budgetBlock
		Charts    []chart
		ChartSVGs []template.HTML
	}{
		Title: joinNonEmpty(" — ", "Calibration report", info.Device.ID, info.Run.Label), Unit: n.u.Symbol,
		Identity: n.identity(info, res), Rows: n.rows(res), Judged: n.judgements(res), Summary: n.summary(res),
		Curve: n.curveLines(res), Complete: info.Run.finished(),
		Verdict: outcomeText(res.Decision), Outcome: res.Decision, Rule: ruleText(res.DecisionRule),
		Warnings: res.Warnings, Budgets: n.budgets(res), Charts: ch, ChartSVGs: svgs,
	}
	if err := page.Execute(w, data); err != nil {
		return fmt.Errorf("render HTML report: %w", err)
	}
	return nil
}
