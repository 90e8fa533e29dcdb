package report

import (
	"bytes"
	"encoding/xml"
	"io"
	"strings"
	"testing"

	"plateau/analysis"
)

// renderHTML renders the scenario and returns the page.
func renderHTML(t *testing.T, info Info, res analysis.Result) string {
	t.Helper()
	var b bytes.Buffer
	if err := HTML(&b, info, res); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

func TestHTMLContent(t *testing.T) {
	info, res := scenario(t)
	page := renderHTML(t, info, res)

	// Three cycles with zero readings: error, hysteresis, drift and zero charts.
	if got := strings.Count(page, "<svg"); got != 4 {
		t.Errorf("page has %d <svg elements, want 4", got)
	}
	for _, want := range []string{
		"PG-0417", "CAL-2025-118", "hydraulic oil", "Verdict: CONDITIONAL PASS", "ILAC-G8:09/2019 §4.2.3",
		"Uncertainty budget per point", "resolution of the device", "@page", "break-inside: avoid",
		"DG-10 &lt;digital&gt;", "as found &amp; adjusted",
		"Judgement per point", "U of one reading", "MPE / U<br>reference", "not evaluated", "Correction curve",
		"ties follow ILAC-G8:09/2019 §4.2", "covers about 95 %",
	} {
		if !strings.Contains(page, want) {
			t.Errorf("page lacks %q", want)
		}
	}
	for _, banned := range []string{"<script", "http://", "https://", "<digital>", "<?xml"} {
		if strings.Contains(strings.ReplaceAll(page, "http://www.w3.org/", ""), banned) {
			t.Errorf("page contains %q: it must be self-contained, escaped and script-free", banned)
		}
	}
	// Each inline chart must be well-formed XML on its own.
	for i, part := range strings.Split(page, "<svg")[1:] {
		end := strings.Index(part, "</svg>")
		if end < 0 {
			t.Fatalf("chart %d: no closing </svg>", i+1)
		}
		if err := wellFormed("<svg" + part[:end+len("</svg>")]); err != nil {
			t.Errorf("chart %d is not well-formed: %v", i+1, err)
		}
	}
}

// A single cycle has no drift: only the error and hysteresis charts.
func TestHTMLSingleCycle(t *testing.T) {
	info, res := scenario(t)
	res.Drift = nil
	res.Zero.Cycles = res.Zero.Cycles[:1]
	if got := strings.Count(renderHTML(t, info, res), "<svg"); got != 2 {
		t.Errorf("page has %d <svg elements, want 2", got)
	}
}

func wellFormed(s string) error {
	d := xml.NewDecoder(strings.NewReader(s))
	for {
		_, err := d.Token()
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return err
		}
	}
}

func BenchmarkHTML(b *testing.B) {
	info, res := scenario(b)
	var buf bytes.Buffer
	b.ReportAllocs()
	for b.Loop() {
		buf.Reset()
		if err := HTML(&buf, info, res); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkText(b *testing.B) {
	info, res := scenario(b)
	b.ReportAllocs()
	for b.Loop() {
		if err := Text(io.Discard, info, res); err != nil {
			b.Fatal(err)
		}
	}
}

// Points without both directions have no hysteresis to draw: no chart
// of zeros.
func TestHTMLNoHysteresisChart(t *testing.T) {
	info, res := scenario(t)
	for i := range res.Points {
		res.Points[i].HysteresisEvaluated = false
	}
	page := renderHTML(t, info, res)
	if strings.Contains(page, "<h3>Hysteresis</h3>") || strings.Count(page, "<svg") != 3 {
		t.Errorf("page draws a hysteresis chart without hysteresis (%d charts)", strings.Count(page, "<svg"))
	}
}
