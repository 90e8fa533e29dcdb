package report

import (
	"bytes"
	"testing"

	"plateau/analysis"
)

// A reference reading of the smallest positive number (5e-324) makes no
// ratio infinite and no report unencodable: no report holds a non-finite
// number (issue found by trying hostile tables).
func TestTinyReferenceGivesFiniteReport(t *testing.T) {
	var pts []analysis.Point
	for c := 1; c <= 2; c++ {
		for i, p := range []float64{5e-324, 8e5, 16e5} {
			for _, d := range []analysis.Direction{analysis.Ascending, analysis.Descending} {
				pts = append(pts, analysis.Point{Cycle: c, Direction: d, Kind: analysis.Measurement, Index: i, Nominal: p,
					Reference: analysis.Window{Mean: p, Count: 10}, DUT: analysis.Window{Mean: p + 1000, Count: 10}})
			}
		}
	}
	dev := analysis.Device{UpperPa: 16e5, ResolutionPa: 1000, Unit: "bar", Accuracy: analysis.Accuracy{EN837Class: 1}}
	ref := analysis.Reference{PercentOfReading: 0.01, K: 2}
	res, err := analysis.Analyze(pts, dev, ref, analysis.Options{Rule: analysis.RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	if err := JSON(&b, Info{}, res); err != nil {
		t.Fatal(err)
	}
	var c bytes.Buffer
	if err := CSV(&c, Info{}, res); err != nil {
		t.Fatal(err)
	}
	for _, bad := range []string{"Inf", "NaN"} {
		if bytes.Contains(c.Bytes(), []byte(bad)) {
			t.Errorf("CSV holds %s", bad)
		}
	}
}
