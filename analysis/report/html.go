package report

import (
	_ "embed"
	"fmt"
	"html/template"
	"io"
	"strconv"
	"strings"

	"plateau/analysis"
)

//go:embed page.html.tmpl
var pageSource string

// page is the report document. Each part of a device's report is a named
// template of its own ("identity", "points", "summary", "charts",
// "budgets"), listed once in "device": a new section is one more define
// and one more line there.
var page = template.Must(template.New("page").Parse(pageSource))

// budgetLine is one contribution of a point's uncertainty budget, as printed.
type budgetLine struct{ Name, Estimate, Distribution, Divisor, Standard string }

// budgetBlock is one point's budget.
type budgetBlock struct {
	Index, Nominal, Combined, Expanded, K string
	Lines                                 []budgetLine
}

func (n numbers) budgets(info Info, res analysis.Result) []budgetBlock {
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
			if headInBalance(info, c) {
				b.Lines = append(b.Lines, budgetLine{Name: contributionText(c.Name), Estimate: "in the balance", Distribution: headInBalanceText, Standard: "in the balance"})
				continue
			}
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

// deviceView is one device's report as the template shows it.
type deviceView struct {
	// Anchor is the section's id in a document of several devices; Page
	// names its print page (whose footer names the device, Short);
	// Heading opens the section. All are empty in a report of one device.
	Anchor, Page, Short, Heading string
	// Missing says why the device has no result; the rest is then empty.
	Missing  string
	Title    string
	Unit     string
	Identity []identityLine
	Rows     []pointRow
	Readings []readingRow
	// Timed says whether the readings carry their time (a recorded table may not).
	Timed     bool
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
	Output    *outputView  // a transmitter's output in mA (output.go); nil for other devices
	Ambient   *ambientView // pressure modes and ambient conditions (ambient.go)
	Compare   *compareView // as found → as left (compare.go); nil for a single calibration
}

// pageView is the whole document: one device's report, or a summary of
// several followed by each one's report.
type pageView struct {
	Title string
	// Print is the @page rules: margins, and on every printed page the
	// report's identity (and device) and the page number.
	Print   template.CSS
	Several bool
	// Run describes the run as a whole (several devices only).
	Run     []identityLine
	Table   []summaryRow
	Devices []deviceView
}

func deviceViewOf(info Info, res analysis.Result) (deviceView, error) {
	n := newNumbers(info.unit(), res.Device.ResolutionPa)
	ch, err := charts(n, res)
	if err != nil {
		return deviceView{}, err
	}
	svgs := make([]template.HTML, len(ch))
	for i, c := range ch {
		svgs[i] = template.HTML(c.SVG) // produced by gonum/plot from numbers only, never from user text
	}
	rd := n.readings(res)
	timed := len(rd) > 0
	for _, r := range rd {
		timed = timed && r.Time != ""
	}
	return deviceView{
		Readings: rd, Timed: timed,
		Title: joinNonEmpty(" — ", "Calibration report", info.Device.ID, info.Run.Label), Unit: n.u.Symbol,
		Identity: n.identity(info, res), Rows: n.rows(res), Judged: n.judgements(res), Summary: n.summary(res),
		Curve: n.curveLines(res), Complete: info.Run.finished(),
		Verdict: outcomeText(res.Decision), Outcome: res.Decision, Rule: ruleText(res.DecisionRule),
		Warnings: res.Warnings, Budgets: n.budgets(info, res), Charts: ch, ChartSVGs: svgs, Output: n.output(res), Ambient: ambientViewOf(n, res),
	}, nil
}

// HTML writes one self-contained page (inline CSS and SVG, no script, no
// external resource) for printing on A4 or Letter and for archiving.
func HTML(w io.Writer, info Info, res analysis.Result) error {
	return HTMLDevices(w, []DeviceReport{{Info: info, Result: res}})
}

// HTMLDevices writes the report of a run as one self-contained document.
// For several devices it opens with a table of every device (identity,
// largest error, verdict, missed readings), each linked to the device's
// section, then one section per device with its full report; printed,
// each section starts on a new page and every page carries the report's
// identity, the device and the page number. One device renders as HTML.
func HTMLDevices(w io.Writer, ds []DeviceReport) error {
	if len(ds) == 0 {
		return fmt.Errorf("render HTML report: no device to report")
	}
	var pv pageView
	if len(ds) == 1 && ds[0].Missing == "" {
		d, err := deviceViewOf(ds[0].Info, ds[0].Result)
		if err != nil {
			return err
		}
		pv = onePage(d, ds[0].Info)
	} else {
		pv = severalView(ds)
		for i, dr := range ds {
			d := deviceView{Missing: dr.Missing}
			if dr.Missing == "" {
				var err error
				if d, err = deviceViewOf(dr.Info, dr.Result); err != nil {
					return fmt.Errorf("device %s: %w", dr.Info.DeviceName(), err)
				}
			}
			d.Anchor, d.Page = pv.Table[i].Anchor, "d"+itoa(i+1)
			d.Short = "Device " + itoa(i+1) + " of " + itoa(len(ds)) + ": " + dr.Info.DeviceName()
			d.Heading = joinNonEmpty(" — ", d.Short, identityText(dr.Info.Device))
			pv.Devices = append(pv.Devices, d)
		}
		pv.Print = printCSS(printIdentity(pv.Title, ds[0].Info), pv.Devices)
	}
	return writePage(w, pv)
}

// onePage is the document of one device's report.
func onePage(d deviceView, info Info) pageView {
	return pageView{Title: d.Title, Devices: []deviceView{d}, Print: printCSS(printIdentity(d.Title, info), nil)}
}

// printIdentity is what every printed page names: the report, the run
// and the certificate number when there is one.
func printIdentity(title string, info Info) string {
	return joinNonEmpty(" · ", title, info.Run.ID, prefixed("certificate ", info.Certificate.Number))
}

func writePage(w io.Writer, pv pageView) error {
	if err := page.Execute(w, pv); err != nil {
		return fmt.Errorf("render HTML report: %w", err)
	}
	return nil
}

// printCSS is the @page rules. Every printed page carries the report's
// identity and its number; the pages of a device's section carry the
// device too, and its section starts on a page of its own (a named page).
func printCSS(identity string, devices []deviceView) template.CSS {
	const small = `font: 7.5pt "DejaVu Sans", "Liberation Sans", Arial, sans-serif; color: #4a5868;`
	var b strings.Builder
	fmt.Fprintf(&b, "@page { size: auto; margin: 14mm 12mm 18mm 12mm;\n"+
		"  @bottom-left { content: %s; %s }\n"+
		"  @bottom-right { content: \"page \" counter(page) \" of \" counter(pages); white-space: nowrap; %s }\n}\n", cssString(identity), small, small)
	for _, d := range devices {
		fmt.Fprintf(&b, "@page %s { @bottom-left { content: %s; %s } }\n#%s { page: %s; }\n",
			d.Page, cssString(identity+" · "+d.Short), small, d.Anchor, d.Page)
	}
	return template.CSS(b.String()) // names are [a-z0-9_-] (anchorsOf); text only through cssString
}

// cssString quotes s as a CSS string: quotes, backslashes, control
// characters and the angle brackets (which could close the style element)
// as hexadecimal escapes.
func cssString(s string) string {
	var b strings.Builder
	b.WriteByte('"')
	for _, r := range s {
		switch {
		case r == '"' || r == '\\' || r == '<' || r == '>' || r == '&' || r < 0x20 || r == 0x7f:
			fmt.Fprintf(&b, "\\%x ", r)
		default:
			b.WriteRune(r)
		}
	}
	b.WriteByte('"')
	return b.String()
}
