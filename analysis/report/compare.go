package report

import (
	"bufio"
	"encoding/json"
	"fmt"
	"io"
	"strings"
	"text/tabwriter"

	"plateau/analysis"
)

// ComparisonText writes the as-found / as-left table: at each point the
// error before and after adjustment, the change, and both decisions.
func ComparisonText(w io.Writer, info Info, c analysis.Comparison, resolutionPa float64) error {
	n := newNumbers(info.unit(), resolutionPa)
	bw := bufio.NewWriter(w)
	fmt.Fprintf(bw, "\nAs found → as left (pressures in %s)\n", n.u.Symbol)
	tw := tabwriter.NewWriter(bw, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprint(tw, "#\tnominal\terror found\terror left\tchange\tU found\tU left\tfound\tleft\t\n")
	for _, p := range c.Points {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", itoa(p.Index+1), n.p(p.NominalPa),
			n.p(p.AsFoundErrorPa), n.p(p.AsLeftErrorPa), n.p(p.ErrorChangePa),
			n.p(p.AsFoundExpandedPa), n.p(p.AsLeftExpandedPa), outcomeText(p.AsFoundDecision), outcomeText(p.AsLeftDecision))
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintf(bw, "\nAS FOUND: %s    AS LEFT: %s\n", outcomeText(c.AsFoundDecision), outcomeText(c.AsLeftDecision))
	for _, m := range c.Warnings {
		fmt.Fprintf(bw, "  - %s\n", strings.ReplaceAll(m, "\n", " "))
	}
	return bw.Flush()
}

// ComparisonJSON writes both results and their comparison as one object;
// each result keeps the analysis schema.
func ComparisonJSON(w io.Writer, info Info, asFound, asLeft analysis.Result, c analysis.Comparison) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	doc := struct {
		Info       infoJSON            `json:"info"`
		AsFound    analysis.Result     `json:"as_found"`
		AsLeft     analysis.Result     `json:"as_left"`
		Comparison analysis.Comparison `json:"comparison"`
	}{infoJSON{info, info.unit().Symbol}, asFound, asLeft, c}
	if err := enc.Encode(doc); err != nil {
		return fmt.Errorf("encode comparison JSON: %w", err)
	}
	return nil
}
