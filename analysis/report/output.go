package report

import (
	_ "embed"
	"fmt"
	"html/template"
	"io"
	"math"
	"strconv"
	"strings"
	"text/tabwriter"

	"plateau/analysis"
)

// A transmitter is reported on its output too: a table of every reading in
// mA (applied pressure, ideal and measured current, error in mA and % of
// span, its NE 43 flag) and one line per point with the budget in mA.

//go:embed output.html.tmpl
var outputTemplate string

// The "output" section joins the page's templates; page is initialised first.
var _ = template.Must(page.New("output.html.tmpl").Parse(outputTemplate))

// outputView is the output section as Text and HTML show it; nil for a
// device that is not a transmitter.
type outputView struct {
	Loop     string // "4 mA at 0.000 bar … 20 mA at 10.000 bar"
	Meter    string
	Unit     string // the pressure unit of the applied pressures
	Readings []outputReadingRow
	Points   []outputPointRow
	Flagged  int
	Minimum  bool // some U was raised to the short procedure's minimum (marked *)
	Verdict  string
	Outcome  analysis.Outcome
}

type outputReadingRow struct {
	Index, Cycle, Direction, Applied, Ideal, Measured, Error, ErrorPct, Flag string
	Flagged                                                                  bool
}

type outputPointRow struct {
	Index, Applied, Ideal, Measured, Error, ErrorPct, U, K, MPE, Decision, Flag string
	Outcome                                                                     analysis.Outcome
}

// mA formats a current with one digit more than the loop meter shows
// (four decimals when its resolution is not given).
func mAFormat(resolution float64) func(float64) string {
	d := 4
	if resolution > 0 && !math.IsInf(resolution, 0) {
		d = min(max(int(math.Ceil(-math.Log10(resolution)-1e-9))+1, 1), 6)
	}
	return func(v float64) string {
		s := strconv.FormatFloat(v, 'f', d, 64)
		if strings.Trim(s, "-0.") == "" {
			s = strings.TrimPrefix(s, "-")
		}
		return s
	}
}

func signedMA(f func(float64) string, v float64) string {
	s := f(v)
	if !strings.HasPrefix(s, "-") && strings.Trim(s, "0.") != "" {
		s = "+" + s
	}
	return s
}

func flagText(s analysis.Signal) string {
	if s == analysis.SignalNone {
		return ""
	}
	return string(s)
}

func (n numbers) output(res analysis.Result) *outputView {
	o := res.Output
	if o == nil {
		return nil
	}
	ma := mAFormat(o.Loop.Meter.ResolutionMA)
	v := &outputView{
		Loop: fmt.Sprintf("4 mA at %s %s … 20 mA at %s %s", n.p(o.Loop.LowerPa), n.u.Symbol, n.p(o.Loop.UpperPa), n.u.Symbol),
		Unit: n.u.Symbol, Flagged: o.Flagged, Verdict: outcomeText(o.Decision), Outcome: o.Decision,
	}
	m := o.Loop.Meter
	switch {
	case m.PercentOfReading == 0 && m.FloorMA == 0:
		v.Meter = "uncertainty not configured"
	default:
		v.Meter = fmt.Sprintf("U = %s %% of reading + %s mA (k = %s)", ftoa(m.PercentOfReading), ftoa(m.FloorMA), ftoa(m.K))
	}
	if m.ResolutionMA > 0 {
		v.Meter += fmt.Sprintf(", resolution %s mA", ftoa(m.ResolutionMA))
	}
	for _, p := range o.Points {
		u := ma(p.ExpandedUncertaintyMA)
		if p.MinimumApplied {
			u += "*" // as in the pressure table
			v.Minimum = true
		}
		v.Points = append(v.Points, outputPointRow{Index: itoa(p.Index + 1), Applied: n.p(p.AppliedPa), Ideal: ma(p.IdealMA),
			Measured: ma(p.MeasuredMA), Error: signedMA(ma, p.ErrorMA), ErrorPct: pct(p.ErrorPercentSpan), U: u,
			K: strconv.FormatFloat(p.CoverageFactor, 'f', 2, 64), MPE: ma(p.MPEMA), Decision: outcomeText(p.Decision), Flag: flagText(p.Signal), Outcome: p.Decision})
		for _, r := range p.Readings {
			v.Readings = append(v.Readings, outputReadingRow{Index: itoa(p.Index + 1), Cycle: itoa(r.Cycle), Direction: dirText(r.Direction),
				Applied: n.p(r.AppliedPa), Ideal: ma(r.IdealMA), Measured: ma(r.MeasuredMA), Error: signedMA(ma, r.ErrorMA),
				ErrorPct: pct(r.ErrorPercentSpan), Flag: flagText(r.Signal), Flagged: r.Signal != analysis.SignalNone})
		}
	}
	return v
}

func dirText(d analysis.Direction) string {
	if d == analysis.Descending {
		return "down"
	}
	return "up"
}

// textOutput writes the output section of the text report; nothing for a
// device that is not a transmitter. w keeps a write error for its Flush.
func textOutput(w io.Writer, n numbers, res analysis.Result) {
	v := n.output(res)
	if v == nil {
		return
	}
	fmt.Fprintf(w, "\nOutput 4–20 mA (loop %s; loop meter %s)\n", v.Loop, v.Meter)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "#\tcycle\tdir\tapplied %s\tideal mA\tmeasured mA\terror mA\terror %% span\tflag\t\n", v.Unit)
	for _, r := range v.Readings {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", r.Index, r.Cycle, r.Direction, r.Applied, r.Ideal, r.Measured, r.Error, r.ErrorPct, r.Flag)
	}
	tw.Flush()
	fmt.Fprintln(w, "\nOutput per point (means; U with the loop meter in the budget)")
	pw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(pw, "#\tapplied %s\tideal mA\tmeasured mA\terror mA\terror %% span\tU mA\tk\tMPE mA\tdecision\tflag\t\n", v.Unit)
	for _, r := range v.Points {
		fmt.Fprintf(pw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", r.Index, r.Applied, r.Ideal, r.Measured, r.Error, r.ErrorPct, r.U, r.K, r.MPE, r.Decision, r.Flag)
	}
	pw.Flush()
	if v.Minimum {
		fmt.Fprintln(w, "  * U raised to the short procedure's minimum (0.2 % of span)")
	}
	if v.Flagged > 0 {
		fmt.Fprintf(w, "  %d readings outside the NE 43 measuring band or at its limits: kept and evaluated as found (see the warnings)\n", v.Flagged)
	}
	fmt.Fprintf(w, "  output verdict: %s\n", v.Verdict)
}
