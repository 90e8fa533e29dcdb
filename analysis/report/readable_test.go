package report

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"strings"
	"testing"
	"time"

	"plateau/analysis"
)

// section returns the HTML of the page's <section class="name">, or fails.
func section(t *testing.T, page, name string) string {
	t.Helper()
	i := strings.Index(page, `<section class="`+name+`"`)
	if i < 0 {
		t.Fatalf("page has no %s section", name)
	}
	j := strings.Index(page[i:], "</section>")
	return page[i : i+j]
}

// The HTML report lists every reading of every point: cycle, direction,
// reference, device and the error of that reading, with its time.
func TestHTMLEveryReading(t *testing.T) {
	info, res := scenario(t)
	s := section(t, renderHTML(t, info, res), "readings")
	// Six points, three cycles, up and down: 36 readings.
	if got := strings.Count(s, "<tr><td"); got != 36 {
		t.Errorf("every-reading table has %d rows, want 36", got)
	}
	for _, want := range []string{"<h2>Every reading</h2>", "<th class=\"num\">cycle</th>", "<th>direction</th>", "reference<br>bar",
		"device<br>bar", "error<br>bar", "time (UTC)",
		// point 6, cycle 3 up: reference 10 + 0.0013 − 0.0007 bar, error 0.0235 + 2·0.0005 bar (the scenario's shift)
		`<td class="num">6</td><td class="num">10.0000</td><td class="num">3</td><td>up</td><td class="num">10.0006</td><td class="num">10.0251</td><td class="num">0.0245</td><td class="num">2026-03-02 08:`,
	} {
		if !strings.Contains(s, want) {
			t.Errorf("every-reading table lacks %q:\n%s", want, s)
		}
	}
	// A table recorded without times has no time column.
	for i := range res.Points {
		for j := range res.Points[i].Readings {
			res.Points[i].Readings[j].Time = time.Time{}
		}
	}
	if s := section(t, renderHTML(t, info, res), "readings"); strings.Contains(s, "time (UTC)") {
		t.Error("readings without times still get a time column")
	}
}

// The certificate's fields reach the identity block of every format, and
// a field not given is left out rather than printed as a dash.
func TestCertificateFields(t *testing.T) {
	info, res := scenario(t)
	info.Certificate = Certificate{Number: "C-2026-0311", Customer: "Example Works <north>", Operator: "A. Tester",
		Date: time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)}
	page := renderHTML(t, info, res)
	for _, want := range []string{"<dt>Certificate number</dt><dd>C-2026-0311</dd>", "<dt>Customer</dt><dd>Example Works &lt;north&gt;</dd>",
		"<dt>Calibrated by</dt><dd>A. Tester</dd>", "<dt>Date of calibration</dt><dd>2026-03-02</dd>",
		"certificate C-2026-0311", // in the footer of every printed page
	} {
		if !strings.Contains(page, want) {
			t.Errorf("HTML lacks %q", want)
		}
	}
	var b bytes.Buffer
	if err := Text(&b, info, res); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"Certificate number     C-2026-0311", "Customer               Example Works <north>", "Calibrated by          A. Tester", "Date of calibration    2026-03-02"} {
		if !strings.Contains(b.String(), want) {
			t.Errorf("text lacks %q:\n%s", want, b.String())
		}
	}
	b.Reset()
	if err := JSON(&b, info, res); err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Info struct {
			Certificate map[string]string `json:"certificate"`
		} `json:"info"`
	}
	if err := json.Unmarshal(b.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	if c := doc.Info.Certificate; c["number"] != "C-2026-0311" || c["customer"] != "Example Works <north>" || c["operator"] != "A. Tester" || c["date"] != "2026-03-02T00:00:00Z" {
		t.Errorf("JSON certificate = %v", c)
	}
	ds, err := ReadJSON(&b)
	if err == nil && len(ds) == 1 && ds[0].Info.Certificate != info.Certificate {
		t.Errorf("certificate read back as %+v", ds[0].Info.Certificate)
	}

	// Only a number: the other fields are left out, and nothing prints a dash.
	info.Certificate = Certificate{Number: "C-1"}
	info.Reference = ReferenceIdentity{}
	info.Conditions = []Condition{{"Medium", ""}}
	info.Run = RunIdentity{}
	info.GeneratedAt = time.Time{}
	info.Device = DeviceIdentity{}
	page = section(t, renderHTML(t, info, res), "identity")
	for _, banned := range []string{"—", "Customer", "Calibrated by", "Date of calibration", "<dt>Medium", "<dt>Run</dt>", "<dt>Generated", "<dt>Reference certificate", "<dt>Device under test"} {
		if strings.Contains(page, banned) {
			t.Errorf("identity block prints %q for an empty field:\n%s", banned, page)
		}
	}
	b.Reset()
	if err := Text(&b, info, res); err != nil {
		t.Fatal(err)
	}
	if head, _, _ := strings.Cut(b.String(), "\nPoints ("); strings.Contains(head, "—") {
		t.Errorf("text identity prints a dash for an empty field:\n%s", head)
	}
}

// The as-found / as-left comparison is in the HTML report too: each
// point's error before and after, the change and both decisions.
func TestComparisonHTML(t *testing.T) {
	info, asLeft := scenario(t)
	_, asFound := scenario(t)
	// As found: every error 0.02 bar larger (invented).
	pts := make([]analysis.Point, 0)
	for _, p := range asLeft.Points {
		for _, r := range p.Readings {
			pts = append(pts, analysis.Point{Cycle: r.Cycle, Kind: analysis.Measurement, Direction: r.Direction, Index: p.Index, Nominal: p.NominalPa,
				Reference: analysis.Window{Mean: r.ReferencePa, Count: 1}, DUT: analysis.Window{Mean: r.DUTPa + 0.02e5, Count: 1}})
		}
	}
	asFound, err := analysis.Analyze(pts, asLeft.Device, asLeft.Reference, analysis.Options{Rule: analysis.RuleFourState})
	if err != nil {
		t.Fatal(err)
	}
	c, err := analysis.Compare(asFound, asLeft)
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	if err := ComparisonHTML(&b, info, asLeft, c); err != nil {
		t.Fatal(err)
	}
	page := b.String()
	s := section(t, page, "compare")
	if got := strings.Count(s, "<tr><td"); got != len(c.Points) {
		t.Errorf("comparison has %d rows, want %d", got, len(c.Points))
	}
	for _, want := range []string{"<h2>As found → as left</h2>", "error as found<br>bar", "change<br>bar",
		`<td class="num">-0.0200</td>`, // every point's change
		"As found: <span class=\"o-" + string(c.AsFoundDecision) + "\">" + outcomeText(c.AsFoundDecision),
	} {
		if !strings.Contains(s, want) {
			t.Errorf("comparison lacks %q:\n%s", want, s)
		}
	}
	if !strings.Contains(page, "<h2>Results per point</h2>") || strings.Index(page, `class="compare"`) > strings.Index(page, `class="points"`) {
		t.Error("the comparison does not come before the as-left results")
	}
	if strings.Contains(renderHTML(t, info, asLeft), `class="compare"`) {
		t.Error("a single calibration shows a comparison")
	}
}

// The CSV of a transmitter carries its output at each point: ideal and
// measured current, the error in mA and % of span, and the NE 43 flag.
func TestCSVTransmitterOutput(t *testing.T) {
	info, res := transmitterResult(t)
	var b bytes.Buffer
	if err := CSV(&b, info, res); err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(&b).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	col := map[string]int{}
	for i, h := range rows[0] {
		col[h] = i
	}
	for _, h := range []string{"ideal_current_mA", "measured_current_mA", "output_error_mA", "output_error_percent_span", "output_flag"} {
		if _, ok := col[h]; !ok {
			t.Fatalf("CSV header lacks %s: %v", h, rows[0])
		}
	}
	// 0.30 mA low everywhere: 4 → 3.70 mA (under the NE 43 band), 12 → 11.70, 20 → 19.70.
	want := [][]string{{"4", "3.7", "-0.3", "-1.875", string(analysis.SignalUnderRange)}, {"12", "11.7", "-0.3", "-1.875", ""}, {"20", "19.7", "-0.3", "-1.875", ""}}
	for i, w := range want {
		r := rows[i+1]
		got := []string{r[col["ideal_current_mA"]], r[col["measured_current_mA"]], r[col["output_error_mA"]], r[col["output_error_percent_span"]], r[col["output_flag"]]}
		if strings.Join(got, ",") != strings.Join(w, ",") {
			t.Errorf("point %d output columns %v, want %v", i+1, got, w)
		}
	}
	// Another device leaves them empty.
	info, other := scenario(t)
	b.Reset()
	if err := CSV(&b, info, other); err != nil {
		t.Fatal(err)
	}
	if rows, _ := csv.NewReader(&b).ReadAll(); !strings.HasSuffix(strings.Join(rows[1], ","), "pass,,,,,") {
		t.Errorf("a gauge's row does not end with five empty output cells: %v", rows[1])
	}
}

// With a pressure balance as the reference and no head correction of the
// run, the head lines of the budget are in the balance's budget, not
// "not evaluated".
func TestHeadInBalanceBudget(t *testing.T) {
	info, res := scenario(t)
	info.Reference.Kind = KindBalance
	var b bytes.Buffer
	if err := Text(&b, info, res); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	for _, want := range []string{"Head correction        " + headInBalanceText, "head correction: height — " + headInBalanceText, "· " + KindBalance} {
		if !strings.Contains(out, want) {
			t.Errorf("text lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "not evaluated: head correction") {
		t.Errorf("text calls the balance's head not evaluated:\n%s", out)
	}
	s := section(t, renderHTML(t, info, res), "budgets")
	if strings.Contains(s, "no head correction configured") || !strings.Contains(s, "<td>head correction: height</td><td class=\"num\">in the balance</td>") {
		t.Errorf("HTML budget does not put the head in the balance's budget:\n%s", s[:min(len(s), 3000)])
	}
	// Another reference keeps the reason.
	info.Reference.Kind = ""
	b.Reset()
	if err := Text(&b, info, res); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(b.String(), "not evaluated: head correction: height — no head correction configured") {
		t.Error("a reference that is not a balance lost its reason for the head")
	}
}
