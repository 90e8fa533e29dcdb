package report

import (
	"bufio"
	"fmt"
	"io"
	"strings"
	"text/tabwriter"

	"plateau/analysis"
)

// Text writes a plain-text report for a terminal: identities, one line per
// point, the summary, the verdict and the warnings.
func Text(w io.Writer, info Info, res analysis.Result) error {
	n := newNumbers(info.unit(), res.Device.ResolutionPa)
	bw := bufio.NewWriter(w)
	fmt.Fprintln(bw, "PRESSURE CALIBRATION BY COMPARISON")
	fmt.Fprintln(bw)
	lw := tabwriter.NewWriter(bw, 0, 0, 2, ' ', 0)
	for _, l := range n.identity(info, res) {
		fmt.Fprintf(lw, "%s\t%s\n", l.Label, l.Value)
	}
	if err := lw.Flush(); err != nil {
		return err
	}

	fmt.Fprintf(bw, "\nPoints (pressures in %s)\n", n.u.Symbol)
	tw := tabwriter.NewWriter(bw, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprint(tw, "#\tnominal\treference\tdevice\terror\thysteresis\trepeatability\tU\tk\t|error|+U\tMPE\tMPE/U ref\tMPE/U\tdecision\t\n")
	for _, r := range n.rows(res) {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n",
			r.Index, r.Nominal, r.Reference, r.DUT, r.Error, r.Hysteresis, r.Repeatability, r.U, r.K, r.Span, r.MPE, r.RefRatio, r.ExpRatio, r.Decision)
	}
	if err := tw.Flush(); err != nil {
		return err
	}

	fmt.Fprintf(bw, "\nJudgement per point (worst reading of each direction with the U of one reading; worst cycle's hysteresis)\n")
	jw := tabwriter.NewWriter(bw, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprint(jw, "#\tup error\tU\tup\tdown error\tU\tdown\thysteresis\tlimit\thysteresis\tpoint\t\n")
	for _, r := range n.judgements(res) {
		fmt.Fprintf(jw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n",
			r.Index, r.UpError, r.UpU, r.Up, r.DownError, r.DownU, r.Down, r.Hysteresis, r.Limit, r.HystOutcome, r.Point)
	}
	if err := jw.Flush(); err != nil {
		return err
	}

	fmt.Fprintf(bw, "\nUncertainty budget (standard uncertainties in %s, by point)\n", n.u.Symbol)
	bt := tabwriter.NewWriter(bw, 0, 0, 2, ' ', tabwriter.AlignRight)
	for _, line := range n.budgetTable(info, res) {
		fmt.Fprintln(bt, strings.Join(line, "\t")+"\t")
	}
	if err := bt.Flush(); err != nil {
		return err
	}
	for _, why := range notEvaluatedReasons(info, res) {
		if strings.Contains(why, headInBalanceText) {
			fmt.Fprintf(bw, "  %s\n", why)
			continue
		}
		fmt.Fprintf(bw, "  not evaluated: %s\n", why)
	}
	textOutput(bw, n, res)

	if err := writeAmbientText(bw, n, res); err != nil {
		return err
	}
	fmt.Fprintln(bw, "\nSummary")
	sw := tabwriter.NewWriter(bw, 0, 0, 2, ' ', 0)
	for _, l := range n.summary(res) {
		fmt.Fprintf(sw, "  %s\t%s\n", l.Label, l.Value)
	}
	if err := sw.Flush(); err != nil {
		return err
	}
	if lines := n.curveLines(res); lines != nil {
		fmt.Fprintf(bw, "\nCorrection curve: reference = Σ a_j · indication^j, in %s (degree %d)\n", n.u.Symbol, res.Correction.Degree)
		cw := tabwriter.NewWriter(bw, 0, 0, 2, ' ', 0)
		for _, l := range lines {
			fmt.Fprintf(cw, "  %s\t%s\n", l.Label, l.Value)
		}
		if err := cw.Flush(); err != nil {
			return err
		}
	}
	fmt.Fprintf(bw, "\nVERDICT: %s\n", outcomeText(res.Decision))
	if !info.Run.finished() {
		fmt.Fprintln(bw, "The run did not capture every planned reading: the verdict covers only the readings shown.")
	}
	if len(res.Warnings) > 0 {
		fmt.Fprintln(bw, "\nWarnings")
		for _, m := range res.Warnings {
			fmt.Fprintf(bw, "  - %s\n", strings.ReplaceAll(m, "\n", " "))
		}
	}
	return bw.Flush()
}
