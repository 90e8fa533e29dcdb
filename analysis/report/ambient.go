package report

import (
	"fmt"
	"html/template"
	"io"
	"strings"
	"text/tabwriter"

	"plateau/analysis"
	"plateau/analysis/units"
)

// ambientView is the ambient conditions and the pressure modes of a run
// as the report shows them; nil when the run has neither.
type ambientView struct {
	Unit string // of the nominal pressures
	// Modes says what the device and the reference read and, when they
	// differ, which barometer converted the reference.
	Modes string
	// Columns name the quantities, Rows give each point's means (a mark
	// where a mean lies outside the reference conditions).
	Columns []string
	Rows    []ambientRow
	// Run is each quantity over every window of the run.
	Run []summaryLine
}

type ambientRow struct {
	Index, Nominal string
	Values         []ambientCell
}

type ambientCell struct {
	Value   string
	Outside bool
}

// outsideMark follows a value outside the reference conditions.
const outsideMark = " (outside)"

func ambientViewOf(n numbers, res analysis.Result) *ambientView {
	v := &ambientView{Unit: n.u.Symbol, Modes: modesText(res)}
	a := res.Ambient
	if a == nil {
		if v.Modes == "" {
			return nil
		}
		return v
	}
	type column struct {
		kind       units.AmbientKind
		instrument string
	}
	var cols []column
	for _, q := range a.Run {
		cols = append(cols, column{q.Kind, q.Instrument})
		v.Columns = append(v.Columns, fmt.Sprintf("%s (%s), %s", q.Kind, q.Instrument, analysis.AmbientSymbol(q.Kind)))
		line := summaryLine{Label: string(q.Kind) + " (" + q.Instrument + ")",
			Value: fmt.Sprintf("%s … %s, mean %s over %d windows", analysis.AmbientText(q.Kind, q.Min), analysis.AmbientText(q.Kind, q.Max), analysis.AmbientText(q.Kind, q.Mean), q.Windows)}
		if c := q.Conditions; c != nil {
			verdict := "within"
			if q.Outside {
				verdict = "outside at times"
			}
			line.Value += fmt.Sprintf("; reference conditions %s: %s", c.Text, verdict)
		}
		v.Run = append(v.Run, line)
	}
	for _, p := range a.Points {
		row := ambientRow{Index: itoa(p.Index + 1), Nominal: n.p(p.NominalPa)}
		for _, c := range cols {
			cell := ambientCell{Value: notEvaluated}
			for _, q := range p.Quantities {
				if q.Kind == c.kind && q.Instrument == c.instrument {
					cell = ambientCell{Value: analysis.AmbientNumber(q.Kind, q.Mean), Outside: q.Outside}
				}
			}
			row.Values = append(row.Values, cell)
		}
		v.Rows = append(v.Rows, row)
	}
	return v
}

// modesText says the modes of the comparison, "" when nothing says one.
func modesText(res analysis.Result) string {
	dev, ref := res.Device.Mode, res.Reference.Mode
	if dev == "" && ref == "" {
		return ""
	}
	if b := res.Reference.Barometer; b != nil {
		u := "no uncertainty given"
		if b.ExpandedPa > 0 {
			k := b.K
			if k == 0 {
				k = 2
			}
			u = fmt.Sprintf("U = %s hPa, k = %g", trimFloat(b.ExpandedPa/100), k)
		}
		return fmt.Sprintf("device in %s pressure; the reference reads %s pressure, converted to %s sample by sample with barometer %s (%s)",
			b.To, b.From, b.To, b.Instrument, u)
	}
	if ref == "" || ref == dev {
		return "device and reference in " + dev + " pressure"
	}
	return fmt.Sprintf("device in %s pressure, reference in %s pressure", dev, ref)
}

func trimFloat(v float64) string {
	return strings.TrimRight(strings.TrimRight(fmt.Sprintf("%.4f", v), "0"), ".")
}

// writeAmbientText adds the ambient conditions to the text report.
func writeAmbientText(w io.Writer, n numbers, res analysis.Result) error {
	v := ambientViewOf(n, res)
	if v == nil {
		return nil
	}
	if v.Modes != "" {
		fmt.Fprintf(w, "\nPressure modes: %s\n", v.Modes)
	}
	if len(v.Columns) == 0 {
		return nil
	}
	fmt.Fprintf(w, "\nAmbient conditions (mean over each point's windows)\n")
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "#\tnominal %s\t%s\t\n", n.u.Symbol, strings.Join(v.Columns, "\t"))
	for _, r := range v.Rows {
		cells := make([]string, len(r.Values))
		for i, c := range r.Values {
			cells[i] = c.Value
			if c.Outside {
				cells[i] += outsideMark
			}
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t\n", r.Index, r.Nominal, strings.Join(cells, "\t"))
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	sw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	for _, l := range v.Run {
		fmt.Fprintf(sw, "  %s\t%s\n", l.Label, l.Value)
	}
	return sw.Flush()
}

// ambientSource renders ambientView in the page; the page's device
// section calls it with {{template "ambient" .Ambient}}.
const ambientSource = `
{{- if .}}
<section class="ambient">
<h2>Conditions</h2>
{{- if .Modes}}
<p>Pressure modes: {{.Modes}}.</p>
{{- end}}
{{- if .Columns}}
<table>
<thead><tr><th class="num">#</th><th class="num">nominal<br>{{.Unit}}</th>{{range .Columns}}<th class="num">{{.}}</th>{{end}}</tr></thead>
<tbody>
{{- range .Rows}}
<tr><td class="num">{{.Index}}</td><td class="num">{{.Nominal}}</td>{{range .Values}}<td class="num{{if .Outside}} o-fail{{end}}">{{.Value}}{{if .Outside}} (outside){{end}}</td>{{end}}</tr>
{{- end}}
</tbody>
</table>
<table>
<tbody>
{{- range .Run}}
<tr><th>{{.Label}}</th><td>{{.Value}}</td></tr>
{{- end}}
</tbody>
</table>
{{- end}}
</section>
{{- end}}`

func init() {
	template.Must(page.New("ambient").Parse(ambientSource))
}
