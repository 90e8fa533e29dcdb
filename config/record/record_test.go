package record

import (
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
