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

	fmt.Fprintf(bw, "\nPoints (pressures in %s, U with k = %s)\n", n.u.Symbol, ftoa(res.CoverageFactor))
	tw := tabwriter.NewWriter(bw, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprint(tw, "#\tnominal\treference\tdevice\terror\thysteresis\trepeatability\tU\tMPE\tTUR\tdecision\t\n")
	for _, r := range n.rows(res) {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n",
			r.Index, r.Nominal, r.Reference, r.DUT, r.Error, r.Hysteresis, r.Repeatability, r.U, r.MPE, r.TUR, r.Decision)
	}
	if err := tw.Flush(); err != nil {
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
	fmt.Fprintf(bw, "\nVERDICT: %s\n", outcomeText(res.Decision))
	if len(res.Warnings) > 0 {
		fmt.Fprintln(bw, "\nWarnings")
		for _, m := range res.Warnings {
			fmt.Fprintf(bw, "  - %s\n", strings.ReplaceAll(m, "\n", " "))
		}
	}
	return bw.Flush()
}
