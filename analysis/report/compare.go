package report

import (
	"bufio"
	"encoding/json"
	"fmt"
	"html/template"
	"io"
	"strings"
	"text/tabwriter"

	"plateau/analysis"
)

// compareView is the as-found / as-left comparison as the page shows it.
type compareView struct {
	Unit            string
	Points          []compareRow
	AsFound, AsLeft string
	FoundOutcome    analysis.Outcome
	LeftOutcome     analysis.Outcome
	Warnings        []string
}

type compareRow struct {
	Index, Nominal, Found, Left, Change, UFound, ULeft, FoundDecision, LeftDecision string
	FoundOutcome, LeftOutcome                                                       analysis.Outcome
}

func (n numbers) comparison(c analysis.Comparison) *compareView {
	v := &compareView{Unit: n.u.Symbol, AsFound: outcomeText(c.AsFoundDecision), AsLeft: outcomeText(c.AsLeftDecision),
		FoundOutcome: c.AsFoundDecision, LeftOutcome: c.AsLeftDecision, Warnings: c.Warnings}
	for _, p := range c.Points {
		v.Points = append(v.Points, compareRow{Index: itoa(p.Index + 1), Nominal: n.p(p.NominalPa),
			Found: n.p(p.AsFoundErrorPa), Left: n.p(p.AsLeftErrorPa), Change: n.p(p.ErrorChangePa),
			UFound: n.p(p.AsFoundExpandedPa), ULeft: n.p(p.AsLeftExpandedPa),
			FoundDecision: outcomeText(p.AsFoundDecision), LeftDecision: outcomeText(p.AsLeftDecision),
			FoundOutcome: p.AsFoundDecision, LeftOutcome: p.AsLeftDecision})
	}
	return v
}

// compareSource renders compareView in the page; the device section
// calls it with {{template "compare" .Compare}}, nothing when nil.
const compareSource = `
{{- with .}}
<section class="compare">
<h2>As found → as left</h2>
<table>
<thead><tr><th class="num">#</th><th class="num">nominal<br>{{.Unit}}</th><th class="num">error as found<br>{{.Unit}}</th><th class="num">error as left<br>{{.Unit}}</th><th class="num">change<br>{{.Unit}}</th><th class="num">U as found<br>{{.Unit}}</th><th class="num">U as left<br>{{.Unit}}</th><th>as found</th><th>as left</th></tr></thead>
<tbody>
{{- range .Points}}
<tr><td class="num">{{.Index}}</td><td class="num">{{.Nominal}}</td><td class="num">{{.Found}}</td><td class="num">{{.Left}}</td><td class="num">{{.Change}}</td><td class="num">{{.UFound}}</td><td class="num">{{.ULeft}}</td><td class="o-{{.FoundOutcome}}">{{.FoundDecision}}</td><td class="o-{{.LeftOutcome}}">{{.LeftDecision}}</td></tr>
{{- end}}
</tbody>
</table>
<p>As found: <span class="o-{{.FoundOutcome}}">{{.AsFound}}</span> · as left: <span class="o-{{.LeftOutcome}}">{{.AsLeft}}</span>. The rest of this report is the as-left calibration.</p>
{{- if .Warnings}}
<ul class="warnings">
{{- range .Warnings}}
<li>{{.}}</li>
{{- end}}
</ul>
{{- end}}
</section>
{{- end}}`

func init() {
	template.Must(page.New("compare").Parse(compareSource))
}

// ComparisonHTML writes the as-left report as HTML writes it, with the
// as-found / as-left comparison after the identity of the device.
func ComparisonHTML(w io.Writer, info Info, asLeft analysis.Result, c analysis.Comparison) error {
	d, err := deviceViewOf(info, asLeft)
	if err != nil {
		return err
	}
	d.Compare = newNumbers(info.unit(), asLeft.Device.ResolutionPa).comparison(c)
	return writePage(w, onePage(d, info))
}

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
