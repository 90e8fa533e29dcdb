package report

import (
	"bytes"
	"strings"
	"testing"

	"plateau/analysis"
	"plateau/analysis/units"
)

// The conditions of a run on the text and HTML reports: the modes and the
// barometer that converted the reference, each point's ambient means
// (marked where outside the reference conditions) and each quantity's
// range over the run. A run without any says nothing about them.
func TestAmbientRendering(t *testing.T) {
	info, res := scenario(t)
	var plain bytes.Buffer
	if err := Text(&plain, info, res); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(plain.String(), "Ambient conditions") || strings.Contains(plain.String(), "Pressure modes") {
		t.Fatalf("a run without ambient instruments or modes shows them:\n%s", plain.String())
	}
	cond := units.Interval{Low: 18, High: 22, Nominal: 20, Text: "20 ± 2 °C"}
	res.Device.Mode, res.Reference.Mode = "gauge", "absolute"
	res.Reference.Barometer = &analysis.Barometer{Instrument: "baro", ExpandedPa: 30, K: 2, From: "absolute", To: "gauge"}
	res.Ambient = &analysis.AmbientResult{
		Run: []analysis.AmbientRange{
			{Instrument: "room", Kind: units.Temperature, Mean: 21.4, Min: 20.9, Max: 22.6, Windows: 42, Conditions: &cond, Outside: true},
			{Instrument: "baro", Kind: units.Barometric, Mean: 101290, Min: 101250, Max: 101330, Windows: 42},
		},
	}
	for i, p := range res.Points {
		tc := 21.0
		if i == len(res.Points)-1 {
			tc = 22.4
		}
		res.Ambient.Points = append(res.Ambient.Points, analysis.AmbientPoint{Index: p.Index, NominalPa: p.NominalPa, Quantities: []analysis.AmbientRange{
			{Instrument: "room", Kind: units.Temperature, Mean: tc, Min: tc, Max: tc, Windows: 6, Conditions: &cond, Outside: tc > 22},
			{Instrument: "baro", Kind: units.Barometric, Mean: 101290, Min: 101290, Max: 101290, Windows: 6},
		}})
	}
	plain.Reset()
	if err := Text(&plain, info, res); err != nil {
		t.Fatal(err)
	}
	txt := plain.String()
	for _, want := range []string{
		"Pressure modes: device in gauge pressure; the reference reads absolute pressure, converted to gauge sample by sample with barometer baro (U = 0.3 hPa, k = 2)",
		"Ambient conditions (mean over each point's windows)",
		"temperature (room), °C", "barometric (baro), hPa",
		"22.40 (outside)",
		"1012.90",
		"temperature (room)  20.90 °C … 22.60 °C, mean 21.40 °C over 42 windows; reference conditions 20 ± 2 °C: outside at times",
	} {
		if !strings.Contains(txt, want) {
			t.Errorf("text report lacks %q:\n%s", want, txt)
		}
	}
	if strings.Count(txt, "(outside)") != 1 {
		t.Errorf("one point is outside the conditions:\n%s", txt)
	}
	var page bytes.Buffer
	if err := HTML(&page, info, res); err != nil {
		t.Fatal(err)
	}
	html := page.String()
	for _, want := range []string{`<section class="ambient">`, "<h2>Conditions</h2>", "barometer baro (U = 0.3 hPa, k = 2)",
		`<td class="num o-fail">22.40 (outside)</td>`, "reference conditions 20 ± 2 °C: outside at times"} {
		if !strings.Contains(html, want) {
			t.Errorf("HTML report lacks %q", want)
		}
	}
}
