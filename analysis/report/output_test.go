package report

import (
	"bytes"
	"strings"
	"testing"

	"plateau/analysis"
	"plateau/analysis/units"
)

// transmitterResult is an invented as-found 0–10 bar transmitter, for the
// renderings only: its output reads 0.30 mA low everywhere, so 3.70 mA at
// zero (under the NE 43 band) and 19.70 mA at 10 bar; one cycle up and down
// against an exact reference, read with a meter of 0.01 % + 0.001 mA
// showing 0.001 mA.
func transmitterResult(t *testing.T) (Info, analysis.Result) {
	t.Helper()
	const bar = 1e5
	loop := analysis.Loop{LowerPa: 0, UpperPa: 10 * bar, Meter: analysis.LoopMeter{PercentOfReading: 0.01, FloorMA: 0.001, K: 2, ResolutionMA: 0.001}}
	var pts []analysis.Point
	for _, dir := range []analysis.Direction{analysis.Ascending, analysis.Descending} {
		for i := 0; i < 3; i++ {
			p := float64(i) * 5 * bar
			dut := p + (-0.30)/16*10*bar // −0.30 mA is −0.1875 bar on 16 mA over 10 bar
			pts = append(pts, analysis.Point{Cycle: 1, Direction: dir, Kind: analysis.Measurement, Index: i, Nominal: p,
				Reference: analysis.Window{Mean: p, Count: 1}, DUT: analysis.Window{Mean: dut, Count: 1}})
		}
	}
	dev := analysis.Device{LowerPa: 0, UpperPa: 10 * bar, ResolutionPa: 0.0001 * bar, Accuracy: analysis.Accuracy{PercentOfSpan: 0.1}, Unit: "bar", Loop: &loop}
	res, err := analysis.Analyze(pts, dev, analysis.Reference{PercentOfReading: 0.01, FloorPa: 10, K: 2}, analysis.Options{Rule: analysis.RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	u, _ := units.Lookup("bar")
	return Info{Unit: u, Device: DeviceIdentity{ID: "PT-7"}}, res
}

// The text and HTML reports of a transmitter carry the output in mA: the
// ideal current 4 + 16·p/10 bar, the measured one, the error in mA and in
// % of span (−0.30 mA is −1.875 %), and the flag of the 3.70 mA zero.
func TestOutputSection(t *testing.T) {
	info, res := transmitterResult(t)
	var text, page bytes.Buffer
	if err := Text(&text, info, res); err != nil {
		t.Fatal(err)
	}
	if err := HTML(&page, info, res); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name string
		out  string
		want []string
	}{
		{"text", text.String(), []string{"Output 4–20 mA (loop 4 mA at 0.00000 bar … 20 mA at 10.00000 bar; loop meter U = 0.01 % of reading + 0.001 mA (k = 2), resolution 0.001 mA)",
			"3.7000", "-0.3000", "-1.875 %", "under-range", "12.0000", "11.7000", "19.7000", "0.0320*", "* U raised to the short procedure's minimum", "output verdict: FAIL"}},
		{"html", page.String(), []string{"<h2>Output 4–20 mA</h2>", `<td class="num">3.7000</td>`, `<td class="num">-0.3000</td>`, `<td class="num">-1.875 %</td>`,
			`<td class="o-fail">under-range</td>`, "Output verdict:"}},
	} {
		for _, w := range c.want {
			if !strings.Contains(c.out, w) {
				t.Errorf("%s report lacks %q", c.name, w)
			}
		}
	}
	if n := strings.Count(text.String(), "under-range"); n != 3 {
		t.Errorf("text names the flag %d times, want 2 readings and 1 point", n)
	}
}

// A device that is not a transmitter has no output section.
func TestNoOutputSectionForGauges(t *testing.T) {
	info, res := scenario(t)
	var text, page bytes.Buffer
	if err := Text(&text, info, res); err != nil {
		t.Fatal(err)
	}
	if err := HTML(&page, info, res); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(text.String(), "Output 4–20 mA") || strings.Contains(page.String(), "Output 4–20 mA") {
		t.Error("an output section for a gauge")
	}
}
