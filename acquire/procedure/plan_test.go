package procedure

import (
	"testing"

	"plateau/analysis"
	"plateau/config"
)

func TestPlanShape(t *testing.T) {
	p := config.Procedure{PointsPa: []float64{0, 5e5, 10e5}, Cycles: 2, Exercise: 1, Zero: true}
	steps := Plan(p, 0)
	// 1 exercise + per cycle: zero + 3 up + 3 down + zero
	if len(steps) != 1+2*(1+3+3+1) {
		t.Fatalf("%d steps", len(steps))
	}
	if CaptureCount(steps) != 16 {
		t.Fatalf("captures %d", CaptureCount(steps))
	}
	keys := map[string]bool{}
	for _, s := range steps {
		if s.Kind != StepCapture {
			continue
		}
		if keys[s.Key()] {
			t.Fatalf("duplicate key %s", s.Key())
		}
		keys[s.Key()] = true
	}
	// Common practice: each series runs through the points in its own
	// direction; the top point is measured in both, after a dwell at the top.
	c1 := steps[1:9]
	want := []struct {
		kind analysis.PointKind
		dir  analysis.Direction
		idx  int
	}{
		{analysis.ZeroBefore, analysis.Ascending, 0},
		{analysis.Measurement, analysis.Ascending, 0}, {analysis.Measurement, analysis.Ascending, 1}, {analysis.Measurement, analysis.Ascending, 2},
		{analysis.Measurement, analysis.Descending, 2}, {analysis.Measurement, analysis.Descending, 1}, {analysis.Measurement, analysis.Descending, 0},
		{analysis.ZeroAfter, analysis.Descending, 0},
	}
	for i, w := range want {
		s := c1[i]
		if s.PointKind != w.kind || s.Direction != w.dir || s.Index != w.idx || s.Cycle != 1 {
			t.Errorf("step %d = %+v, want %+v", i, s, w)
		}
	}
	if !c1[4].TopHold || c1[5].TopHold {
		t.Error("the dwell at the top belongs to the first descending point only")
	}
}
