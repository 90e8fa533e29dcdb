package analysis

import (
	"encoding/json"
	"math"
	"strings"
	"testing"
)

// The NE 43 levels of REFERENCES.md §7 ([C-sec]): 3.8–20.5 mA is the
// measuring band, ≤ 3.6 and ≥ 21.0 mA failure signals; the saturation
// tolerance (0.005 mA) is our own choice, so 3.803 is at the limit and
// 3.81 is not.
func TestClassifyCurrent(t *testing.T) {
	cases := []struct {
		mA   float64
		want Signal
	}{
		{4, SignalNone}, {12, SignalNone}, {20, SignalNone}, {3.81, SignalNone}, {20.49, SignalNone},
		{3.8, SignalSaturated}, {3.803, SignalSaturated}, {3.797, SignalSaturated}, {20.5, SignalSaturated}, {20.504, SignalSaturated},
		{3.70, SignalUnderRange}, {3.79, SignalUnderRange}, {3.61, SignalUnderRange},
		{20.51, SignalOverRange}, {20.99, SignalOverRange},
		{3.6, SignalFailureLow}, {0, SignalFailureLow}, {-1, SignalFailureLow}, {math.NaN(), SignalFailureLow},
		{21, SignalFailureHigh}, {22.5, SignalFailureHigh}, {math.Inf(1), SignalFailureHigh},
	}
	for _, c := range cases {
		if got := ClassifyCurrent(c.mA); got != c.want {
			t.Errorf("%g mA: %q, want %q", c.mA, got, c.want)
		}
	}
}

// REFERENCES.md §7 test vector, range 0–10 bar: 0, 2.5, 5, 7.5, 10 bar give
// 4, 8, 12, 16, 20 mA.
func TestLoopIdealCurrent(t *testing.T) {
	loop := Loop{LowerPa: 0, UpperPa: 10 * bar}
	for _, c := range []struct{ bar, mA float64 }{{0, 4}, {2.5, 8}, {5, 12}, {7.5, 16}, {10, 20}} {
		if got := loop.MilliAmps(c.bar * bar); math.Abs(got-c.mA) > 1e-12 {
			t.Errorf("%g bar: %g mA, want %g", c.bar, got, c.mA)
		}
	}
	// A compound range −1 … 9 bar: 4 mA at −1 bar, 12 mA at 4 bar.
	compound := Loop{LowerPa: -1 * bar, UpperPa: 9 * bar}
	if a, b := compound.MilliAmps(-1*bar), compound.MilliAmps(4*bar); a != 4 || math.Abs(b-12) > 1e-12 {
		t.Errorf("compound: %g and %g mA", a, b)
	}
}

// transmitterPoints are two ascending cycles of a 0–10 bar transmitter
// against an exact reference; the measured currents are the ideal ones
// plus errMA at each point, and the DUT's pressure is what a loop driver
// would make of that current. The same in both cycles, so repeatability
// is evaluated and zero.
func transmitterPoints(loop Loop, errMA []float64) []Point {
	var pts []Point
	for c := 1; c <= 2; c++ {
		for i, e := range errMA {
			p := float64(i) * 2.5 * bar
			mA := loop.MilliAmps(p) + e
			dut := loop.LowerPa + (mA-LoopZeroMA)/LoopSpanMA*(loop.UpperPa-loop.LowerPa)
			pts = append(pts, pt(c, Ascending, i, p, p, dut))
		}
	}
	return pts
}

// The expected figures are worked by hand from the definitions of §7:
// ideal = 4 + 16·p/10 bar; error % of span = error mA / 16 mA × 100.
func TestOutputErrors(t *testing.T) {
	loop := Loop{LowerPa: 0, UpperPa: 10 * bar, Meter: LoopMeter{PercentOfReading: 0.01, FloorMA: 0.001, K: 2, ResolutionMA: 0.001}}
	dev := Device{LowerPa: 0, UpperPa: 10 * bar, ResolutionPa: 0.0001 * bar, Accuracy: Accuracy{PercentOfSpan: 0.1}, Unit: "bar", Loop: &loop}
	ref := Reference{PercentOfReading: 0.01, FloorPa: 0.0001 * bar, K: 2}
	errMA := []float64{-0.30, 0.008, 0.008, -0.004, 0.016}
	res, err := Analyze(transmitterPoints(loop, errMA), dev, ref, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	out := res.Output
	if out == nil || len(out.Points) != 5 {
		t.Fatalf("output %+v", out)
	}
	want := []struct {
		ideal, measured, errMA, pct float64
		signal                      Signal
		decision                    Outcome
	}{
		{4, 3.70, -0.30, -1.875, SignalUnderRange, Fail}, // an as-found zero of 3.70 mA: a finding, not a lost point
		{8, 8.008, 0.008, 0.05, SignalNone, Pass},
		{12, 12.008, 0.008, 0.05, SignalNone, Pass},
		{16, 15.996, -0.004, -0.025, SignalNone, Pass},
		{20, 20.016, 0.016, 0.1, SignalNone, Pass}, // on the MPE of 0.1 % of span (0.016 mA): simple acceptance passes a tie
	}
	for i, w := range want {
		op := out.Points[i]
		for _, c := range []struct {
			name      string
			got, want float64
		}{{"ideal", op.IdealMA, w.ideal}, {"measured", op.MeasuredMA, w.measured}, {"error", op.ErrorMA, w.errMA}, {"% span", op.ErrorPercentSpan, w.pct}, {"MPE", op.MPEMA, 0.016}} {
			if math.Abs(c.got-c.want) > 1e-9 {
				t.Errorf("point %d %s: %.9f, want %g", i+1, c.name, c.got, c.want)
			}
		}
		if op.Signal != w.signal || op.Decision != w.decision {
			t.Errorf("point %d: signal %q decision %s, want %q %s", i+1, op.Signal, op.Decision, w.signal, w.decision)
		}
		for _, r := range op.Readings {
			if r.Signal != w.signal || math.Abs(r.ErrorMA-w.errMA) > 1e-9 {
				t.Errorf("point %d cycle %d: reading %+v", i+1, r.Cycle, r)
			}
		}
	}
	if out.Flagged != 2 || out.Decision != Fail || res.Decision != Fail {
		t.Errorf("flagged %d, output decision %s, overall %s; want 2 flagged readings and a fail", out.Flagged, out.Decision, res.Decision)
	}
	if math.Abs(out.MaxAbsErrorMA-0.30) > 1e-9 || math.Abs(out.MaxAbsErrorPercentSpan-1.875) > 1e-9 {
		t.Errorf("largest error %g mA, %g %%", out.MaxAbsErrorMA, out.MaxAbsErrorPercentSpan)
	}
	if !strings.Contains(strings.Join(res.Warnings, "\n"), "cycle 1 ascending: the output read 3.700 mA, below the NE 43 measuring band") {
		t.Errorf("no warning for the flagged zero: %q", res.Warnings)
	}

	// The budget at 5 bar (point 3), by hand:
	//   reference: U = 0.01 % × 5 bar + 0.1 mbar = 0.6 mbar = 60 Pa, k = 2 → 30 Pa × 16 mA/10⁶ Pa = 0.00048 mA
	//   loop meter: U = 0.01 % × 12.008 mA + 0.001 mA = 0.0022008 mA, k = 2 → 0.0011004 mA
	//   meter resolution: 0.001 mA / 2√3 = 0.000288675 mA, in place of the device resolution
	//   repeatability: range 0 → 0; nothing else is evaluated.
	op := out.Points[2]
	terms := map[string]OutputContribution{}
	for _, c := range op.Budget {
		terms[c.Name] = c
	}
	for _, c := range []struct {
		name string
		u    float64
	}{{"reference", 0.00048}, {"loop_meter", 0.0011004}, {"loop_meter_resolution", 0.001 / (2 * math.Sqrt(3))}, {"repeatability", 0}} {
		got, ok := terms[c.name]
		if !ok || !got.Evaluated || math.Abs(got.StandardUncertaintyMA-c.u) > 1e-12 {
			t.Errorf("budget %s: %+v, want u = %g mA", c.name, got, c.u)
		}
	}
	if _, ok := terms["resolution"]; ok {
		t.Error("the device resolution is still in the budget beside the meter's")
	}
	uc := math.Sqrt(0.00048*0.00048 + 0.0011004*0.0011004 + 0.001*0.001/12)
	if math.Abs(op.CombinedUncertaintyMA-uc) > 1e-12 || math.Abs(op.ExpandedUncertaintyMA-2*uc) > 1e-12 {
		t.Errorf("u_c %g U %g mA, want %g and %g", op.CombinedUncertaintyMA, op.ExpandedUncertaintyMA, uc, 2*uc)
	}

	// The result travels as JSON with its units in the keys.
	b, err := json.Marshal(res)
	if err != nil {
		t.Fatal(err)
	}
	for _, key := range []string{`"output":`, `"ideal_ma":4`, `"signal":"under-range"`, `"expanded_uncertainty_ma":`} {
		if !strings.Contains(string(b), key) {
			t.Errorf("JSON lacks %s", key)
		}
	}
}

// A flag the bench stored with a point stands even where the mean current
// alone would not be flagged; an older point without one is classified
// from its current.
func TestOutputKeepsStoredFlag(t *testing.T) {
	loop := Loop{LowerPa: 0, UpperPa: 10 * bar}
	dev := Device{LowerPa: 0, UpperPa: 10 * bar, ResolutionPa: 0.001 * bar, Accuracy: Accuracy{PercentOfSpan: 0.25}, Loop: &loop}
	pts := transmitterPoints(loop, []float64{0, 0, 0})
	pts[0].Signal = SignalSaturated
	res, err := Analyze(pts, dev, Reference{FloorPa: 10, K: 2}, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	rs := res.Output.Points[0].Readings
	if rs[0].Signal != SignalSaturated || rs[1].Signal != SignalNone || res.Output.Flagged != 1 {
		t.Errorf("readings %+v, flagged %d", rs, res.Output.Flagged)
	}
}

func TestOutputRefusesBadLoop(t *testing.T) {
	good := Device{LowerPa: 0, UpperPa: 10 * bar, ResolutionPa: 0.001 * bar, Accuracy: Accuracy{PercentOfSpan: 0.25}}
	cases := []struct {
		name string
		loop Loop
		msg  string
	}{
		{"other span", Loop{LowerPa: 0, UpperPa: 16 * bar}, "differs from the device range"},
		{"other zero", Loop{LowerPa: -1 * bar, UpperPa: 10 * bar}, "differs from the device range"},
		{"reversed", Loop{LowerPa: 10 * bar, UpperPa: 0}, "upper above the lower"},
		{"NaN", Loop{LowerPa: math.NaN(), UpperPa: 10 * bar}, "finite"},
		{"meter without k", Loop{UpperPa: 10 * bar, Meter: LoopMeter{FloorMA: 0.002}}, "coverage factor"},
		{"negative resolution", Loop{UpperPa: 10 * bar, Meter: LoopMeter{ResolutionMA: -0.001}}, "resolution"},
	}
	for _, c := range cases {
		dev := good
		dev.Loop = &c.loop
		_, err := Analyze(transmitterPoints(Loop{UpperPa: 10 * bar}, []float64{0, 0}), dev, Reference{FloorPa: 10, K: 2}, Options{Rule: RuleSimple})
		if err == nil || !strings.Contains(err.Error(), c.msg) {
			t.Errorf("%s: %v, want %q", c.name, err, c.msg)
		}
	}
	// The same range written in other units is the same range.
	dev := good
	dev.Loop = &Loop{LowerPa: 0, UpperPa: 10*bar + 1e-7}
	if _, err := Analyze(transmitterPoints(Loop{UpperPa: 10 * bar}, []float64{0, 0}), dev, Reference{FloorPa: 10, K: 2}, Options{Rule: RuleSimple}); err != nil {
		t.Errorf("range within rounding refused: %v", err)
	}
}
