package record

import (
	"math"
	"os"
	"strings"
	"testing"

	"plateau/analysis"
	"plateau/config"
)

func TestAnalysisInputsFromExample(t *testing.T) {
	cfg, err := config.Load("../../testdata/config/sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	dev, ref, opt := AnalysisInputs(cfg)
	if dev.Accuracy.EN837Class != 1 || dev.UpperPa != 16e5 || ref.K != 2 || ref.PercentOfReading != 0.01 || opt.Rule != analysis.RuleFourState {
		t.Fatalf("dev %+v ref %+v opt %+v", dev, ref, opt)
	}
	if err := dev.Validate(); err != nil {
		t.Fatal(err)
	}
}

// The head correction's air column belongs to gauge pressure only: between
// two levels a gauge pressure differs by (ρ_f − ρ_a)·g·Δh, since the
// atmosphere it is measured against differs by ρ_a·g·Δh too, while an
// absolute pressure differs by ρ_f·g·Δh (hydrostatics, common practice;
// the formula is the one in analysis.HeadCorrection).
func TestHeadAirColumnByMode(t *testing.T) {
	data, err := os.ReadFile("../../testdata/config/ambient.yaml")
	if err != nil {
		t.Fatal(err)
	}
	base := string(data)
	head := "head:\n  fluid_density: 860\n  reference_height: 0.9\n  device_height: 1.1\n"
	for _, c := range []struct {
		name    string
		edits   [][2]string
		wantAir float64
	}{
		{"gauge device, converted reference", nil, 1.2},
		{"absolute device and reference", [][2]string{{"upper: 16 bar               # gauge (the default mode)", "upper: 16 bar(a)"}, {"lower: 0 bar\n", "lower: 0 bar(a)\n"}}, 0},
	} {
		t.Run(c.name, func(t *testing.T) {
			text := base + head
			for _, e := range c.edits {
				if !strings.Contains(text, e[0]) {
					t.Fatalf("no %q to replace", e[0])
				}
				text = strings.Replace(text, e[0], e[1], 1)
			}
			cfg, err := config.Parse([]byte(text), "ambient.yaml")
			if err != nil {
				t.Fatal(err)
			}
			_, ref, _ := AnalysisInputs(cfg)
			if ref.Head.AirDensity != c.wantAir || ref.Head.FluidDensity != 860 {
				t.Errorf("head %+v: want air density %g", ref.Head, c.wantAir)
			}
			// ρ_f·g·Δh for the absolute device: 860 × 9.80665 × −0.2 Pa.
			want := (860 - c.wantAir) * 9.80665 * (0.9 - 1.1)
			if got := ref.Head.Pa(); math.Abs(got-want) > 1e-9 {
				t.Errorf("correction %g Pa, want %g", got, want)
			}
		})
	}
}
