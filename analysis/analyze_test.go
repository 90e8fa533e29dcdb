package analysis

import (
	"encoding/json"
	"math"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"

	"plateau/analysis/units"
)

const bar = 1e5

func pt(cycle int, dir Direction, index int, nominal, ref, dut float64) Point {
	return Point{Cycle: cycle, Direction: dir, Kind: Measurement, Index: index, Nominal: nominal,
		Reference: Window{Mean: ref, Count: 1}, DUT: Window{Mean: dut, Count: 1}}
}

func zeroPt(cycle int, kind PointKind, ref, dut float64) Point {
	return Point{Cycle: cycle, Kind: kind, Reference: Window{Mean: ref, Count: 1}, DUT: Window{Mean: dut, Count: 1}}
}

// worked115c returns the series of REFERENCES.md §1.5(c): cycle 1 up = M1,
// cycle 1 down = M2, cycle 2 up = M3 (no cycle 2 down), DUT 0–10 bar.
func worked115c() ([]Point, Device, Reference) {
	p := []float64{0, 2, 4, 6, 8, 10}
	m1 := []float64{0.000, 2.004, 4.006, 6.007, 8.006, 10.004}
	m2 := []float64{0.002, 2.008, 4.011, 6.012, 8.010, 10.005}
	m3 := []float64{0.001, 2.005, 4.007, 6.008, 8.007, 10.005}
	var pts []Point
	for i := range p {
		pts = append(pts, pt(1, Ascending, i, p[i]*bar, p[i]*bar, m1[i]*bar))
	}
	for i := len(p) - 1; i >= 0; i-- {
		pts = append(pts, pt(1, Descending, i, p[i]*bar, p[i]*bar, m2[i]*bar))
	}
	for i := range p {
		pts = append(pts, pt(2, Ascending, i, p[i]*bar, p[i]*bar, m3[i]*bar))
	}
	dev := Device{LowerPa: 0, UpperPa: 10 * bar, ResolutionPa: 0.001 * bar, Accuracy: Accuracy{EN837Class: 0.1}, Unit: "bar"}
	ref := Reference{FloorPa: 0.0008 * bar, K: 2}
	return pts, dev, ref
}

// Source: REFERENCES.md §1.5(c) — a test vector of our own construction from
// the §1.4 formulas, which are themselves from memory ([M]); the table values
// were computed by our own arithmetic ([X]). It checks that the code follows
// those formulas, not that the formulas are the published ones.
func TestWorkedExample115c(t *testing.T) {
	pts, dev, ref := worked115c()
	res, err := Analyze(pts, dev, ref, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	// bar values printed to 6 decimals: compare within half a unit of the last digit.
	// h, b, u_c and U are the table's. x̄, Δ and the error span are not: the
	// table averages all three readings, while the mean is now the midpoint
	// of the ascending mean (M1 + M3)/2 and the descending M2 (own arithmetic
	// [X], e.g. at 2 bar (2.0045 + 2.008)/2 = 2.00625).
	table := []struct{ xbar, delta, h, b, uc, U, span float64 }{
		{0.001250, +0.001250, 0.002, 0.001, 0.000997, 0.001993, 0.003243},
		{2.006250, +0.006250, 0.004, 0.001, 0.001412, 0.002824, 0.009074},
		{4.008750, +0.008750, 0.005, 0.001, 0.001656, 0.003313, 0.012063},
		{6.009750, +0.009750, 0.005, 0.001, 0.001656, 0.003313, 0.013063},
		{8.008250, +0.008250, 0.004, 0.001, 0.001412, 0.002824, 0.011074},
		{10.004750, +0.004750, 0.001, 0.001, 0.000862, 0.001724, 0.006474},
	}
	if len(res.Points) != len(table) {
		t.Fatalf("%d points, want %d", len(res.Points), len(table))
	}
	near := func(what string, i int, gotPa, wantBar float64) {
		t.Helper()
		if math.Abs(gotPa/bar-wantBar) > 0.5e-6+1e-12 {
			t.Errorf("point %d %s = %.7f bar, table %.6f", i, what, gotPa/bar, wantBar)
		}
	}
	for i, row := range table {
		p := res.Points[i]
		near("x̄", i, p.DUTMeanPa, row.xbar)
		near("Δ", i, p.MeanErrorPa, row.delta)
		near("correction", i, -p.CorrectionPa, row.delta)
		near("h", i, p.HysteresisPa, row.h)
		near("b", i, p.RepeatabilityPa, row.b)
		near("u_c", i, p.CombinedUncertaintyPa, row.uc)
		near("U", i, p.ExpandedUncertaintyPa, row.U)
		near("error span", i, p.ErrorSpanPa, row.span)
		near("MPE", i, p.MPEPa, 0.010)
	}
	if res.Zero.Source != "nominal-zero-points" || math.Abs(res.Zero.DeviationPa/bar-0.002) > 1e-12 {
		t.Errorf("f0 = %g bar from %s, want 0.002 from the nominal-zero points", res.Zero.DeviationPa/bar, res.Zero.Source)
	}
	// The table's linearity figures are of the mean of all three readings,
	// so they are checked on that curve (REFERENCES.md §1.5(c), [X]).
	var xs, ys []float64
	for i := 0; i < 6; i++ {
		var sum float64
		for _, p := range pts {
			if p.Index == i {
				sum += p.DUT.Mean
			}
		}
		xs, ys = append(xs, pts[i].Reference.Mean), append(ys, sum/3)
	}
	all, err := linearities(xs, ys, 10*bar, allLinearity)
	if err != nil {
		t.Fatal(err)
	}
	lin := map[LinearityKind]Linearity{}
	for _, l := range all {
		lin[l.Kind] = l
	}
	// Terminal-based 0.0058 bar = 0.058 % of span.
	if l := lin[LinearityTerminal]; math.Abs(l.MaxDeviationPa/bar-0.0058) > 1e-9 || math.Abs(l.MaxDeviationPercentSpan-0.058) > 1e-7 {
		t.Errorf("terminal linearity %g bar (%g %%), want 0.0058 bar (0.058 %%)", l.MaxDeviationPa/bar, l.MaxDeviationPercentSpan)
	}
	// Least squares: slope 1.00036190, intercept 0.00419048 bar, max dev 0.00319 bar.
	if l := lin[LinearityLeastSquares]; math.Abs(l.Slope-1.00036190) > 0.5e-8 || math.Abs(l.Intercept/bar-0.00419048) > 0.5e-8 ||
		math.Abs(l.MaxDeviationPa/bar-0.00319) > 0.5e-5 || math.Abs(l.MaxDeviationPercentSpan-0.0319) > 0.5e-4 {
		t.Errorf("least squares: slope %.9f intercept %.9f bar max %.6f bar (%.5f %%)", l.Slope, l.Intercept/bar, l.MaxDeviationPa/bar, l.MaxDeviationPercentSpan)
	}
	// Independent: slope 1.00036667, intercept 0.0039 bar, max dev 0.0029 bar exactly (0.029 %).
	if l := lin[LinearityIndependent]; math.Abs(l.Slope-1.00036667) > 0.5e-8 || math.Abs(l.Intercept/bar-0.0039) > 1e-9 ||
		math.Abs(l.MaxDeviationPa/bar-0.0029) > 1e-9 || math.Abs(l.MaxDeviationPercentSpan-0.029) > 1e-8 {
		t.Errorf("independent: slope %.9f intercept %.9f bar max %.9f bar", l.Slope, l.Intercept/bar, l.MaxDeviationPa/bar)
	}
	// Zero-based (not in the table; our own arithmetic [X]): the optimum
	// balances the 4 bar and 10 bar deviations: 166/42000 bar.
	if l := lin[LinearityZeroBased]; math.Abs(l.MaxDeviationPa/bar-166.0/42000) > 1e-9 || math.Abs(l.At(0)/bar-0.001) > 1e-12 {
		t.Errorf("zero-based: max %.9f bar through %.6f bar", l.MaxDeviationPa/bar, l.At(0)/bar)
	}
	// Decisions, class 0.1 (MPE 0.010 bar). The table judged the mean; now
	// every reading of each direction is judged (EN 837-1 applies the MPE
	// with rising and with falling pressure, REFERENCES.md §2.1 [M]): the
	// M2 readings at 4 and 6 bar (errors 0.011 and 0.012 bar) are out, the
	// one at 8 bar (0.010 bar) lies on the MPE and counts as within it.
	for _, c := range []struct {
		rule    DecisionRule
		want    []Outcome
		overall Outcome
	}{
		{RuleSimple, []Outcome{Pass, Pass, Fail, Fail, Pass, Pass}, Fail},
		{RuleGuarded, []Outcome{Pass, Pass, Fail, Fail, Fail, Pass}, Fail},
		{RuleFourState, []Outcome{Pass, Pass, ConditionalFail, Fail, ConditionalPass, Pass}, Fail},
	} {
		r, err := Analyze(pts, dev, ref, Options{Rule: c.rule})
		if err != nil {
			t.Fatal(err)
		}
		for i, p := range r.Points {
			if p.Decision != c.want[i] {
				t.Errorf("%s rule at %g bar: %s, want %s", c.rule, p.NominalPa/bar, p.Decision, c.want[i])
			}
		}
		if r.Decision != c.overall || r.DecisionRule != c.rule {
			t.Errorf("%s rule overall %s, want %s", c.rule, r.Decision, c.overall)
		}
	}
	// The same zero readings given explicitly must give the same f0.
	explicit := append([]Point{zeroPt(1, ZeroBefore, 0, 0), zeroPt(1, ZeroAfter, 0, 0.002*bar)}, pts...)
	r2, err := Analyze(explicit, dev, ref, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	if r2.Zero.Source != "zero-readings" || math.Abs(r2.Zero.DeviationPa-res.Zero.DeviationPa) > 1e-9 {
		t.Errorf("explicit zeros: f0 %g from %s", r2.Zero.DeviationPa, r2.Zero.Source)
	}
	// Budget: the five contributions with their divisors.
	b := res.Points[3].Budget
	names := []string{"reference", "resolution", "zero_deviation", "repeatability", "hysteresis"}
	for i, n := range names {
		if b[i].Name != n || math.Abs(b[i].StandardUncertaintyPa-b[i].EstimatePa/b[i].Divisor) > 1e-12 {
			t.Errorf("budget line %d: %+v", i, b[i])
		}
	}
	if b[0].Divisor != 2 || b[0].Distribution != "normal" || math.Abs(b[1].Divisor-2*math.Sqrt(3)) > 1e-15 {
		t.Errorf("budget divisors: %+v", b)
	}
	if res.MinReferenceRatio == nil || math.Abs(*res.MinReferenceRatio-12.5) > 1e-9 {
		t.Errorf("MPE / U_ref = %v, want 0.010/0.0008 = 12.5", res.MinReferenceRatio)
	}
	// Six points for class 0.1 is below the ten EN 837 practice asks for.
	if !hasWarning(res, "EN 837-1 practice") {
		t.Errorf("no point-count warning in %q", res.Warnings)
	}
}

func hasWarning(r Result, sub string) bool {
	for _, w := range r.Warnings {
		if strings.Contains(w, sub) {
			return true
		}
	}
	return false
}

// synth builds a run over 0–16 bar with 9 points: DUT(p, cycle, dir).
func synth(cycles int, dut func(p float64, cycle int, dir Direction) float64) []Point {
	var pts []Point
	for c := 1; c <= cycles; c++ {
		for i := 0; i <= 8; i++ {
			p := float64(i) * 2 * bar
			pts = append(pts, pt(c, Ascending, i, p, p, dut(p, c, Ascending)))
		}
		for i := 8; i >= 0; i-- {
			p := float64(i) * 2 * bar
			pts = append(pts, pt(c, Descending, i, p, p, dut(p, c, Descending)))
		}
	}
	return pts
}

var dev16 = Device{LowerPa: 0, UpperPa: 16 * bar, ResolutionPa: 10, Accuracy: Accuracy{EN837Class: 0.25}}
var ref16 = Reference{PercentOfReading: 0.01, FloorPa: 5, K: 2}

// Properties that hold by the definitions (common practice, no source needed).
func TestProperties(t *testing.T) {
	opt := Options{Rule: RuleFourState}
	t.Run("pure zero offset", func(t *testing.T) {
		res, err := Analyze(synth(3, func(p float64, _ int, _ Direction) float64 { return p + 250 }), dev16, ref16, opt)
		if err != nil {
			t.Fatal(err)
		}
		for _, p := range res.Points {
			if math.Abs(p.MeanErrorPa-250) > 1e-9 || p.HysteresisPa > 1e-9 || p.RepeatabilityPa > 1e-9 || p.CorrectionPa != -p.MeanErrorPa {
				t.Errorf("point %d: Δ %g h %g b %g", p.Index, p.MeanErrorPa, p.HysteresisPa, p.RepeatabilityPa)
			}
			for _, r := range p.Readings {
				if math.Abs(r.ErrorPa-250) > 1e-9 {
					t.Errorf("reading %+v", r)
				}
			}
		}
		for _, l := range res.Linearity {
			if l.MaxDeviationPa > 1e-8 {
				t.Errorf("%s linearity %g Pa for a pure offset", l.Kind, l.MaxDeviationPa)
			}
		}
	})
	t.Run("pure span error", func(t *testing.T) {
		res, err := Analyze(synth(2, func(p float64, _ int, _ Direction) float64 { return p * 1.001 }), dev16, ref16, opt)
		if err != nil {
			t.Fatal(err)
		}
		for _, p := range res.Points {
			if math.Abs(p.MeanErrorPa-0.001*p.ReferenceMeanPa) > 1e-8 {
				t.Errorf("point %d: Δ %g, want %g", p.Index, p.MeanErrorPa, 0.001*p.ReferenceMeanPa)
			}
		}
		for _, l := range res.Linearity {
			if l.MaxDeviationPa > 1e-8 || math.Abs(l.Slope-1.001) > 1e-12 {
				t.Errorf("%s: slope %g, deviation %g", l.Kind, l.Slope, l.MaxDeviationPa)
			}
		}
		// The correction curve undoes the span error.
		if c := res.Correction; c == nil || math.Abs(c.Correct(1.001*7*bar)-7*bar) > 1e-6 || !c.Covers(8*bar) || c.Covers(17*bar) {
			t.Errorf("correction curve %+v", res.Correction)
		}
	})
	t.Run("pure hysteresis", func(t *testing.T) {
		res, err := Analyze(synth(3, func(p float64, _ int, d Direction) float64 {
			if d == Descending {
				return p + 40
			}
			return p - 40
		}), dev16, ref16, opt)
		if err != nil {
			t.Fatal(err)
		}
		for _, p := range res.Points {
			if math.Abs(p.HysteresisPa-80) > 1e-9 || math.Abs(p.MeanErrorPa) > 1e-9 || p.RepeatabilityPa > 1e-9 {
				t.Errorf("point %d: h %g Δ %g b %g", p.Index, p.HysteresisPa, p.MeanErrorPa, p.RepeatabilityPa)
			}
		}
	})
	t.Run("repeatability is the largest same-direction range", func(t *testing.T) {
		res, err := Analyze(synth(3, func(p float64, c int, d Direction) float64 {
			if d == Ascending {
				return p + float64(c)*10 // ups 10, 20, 30: range 20
			}
			return p + float64(c%2)*35 // downs 35, 0, 35: range 35
		}), dev16, ref16, opt)
		if err != nil {
			t.Fatal(err)
		}
		for _, p := range res.Points {
			if math.Abs(p.RepeatabilityPa-35) > 1e-9 || p.Up.ErrorRangePa != 20 || p.Down.Series != 3 {
				t.Errorf("point %d: b %g up %+v", p.Index, p.RepeatabilityPa, p.Up)
			}
			// gonum as an independent computation of the sample SD.
			var errs []float64
			for _, r := range p.Readings {
				errs = append(errs, r.ErrorPa)
			}
			if math.Abs(stat.StdDev(errs, nil)-p.ErrorStdDevPa) > 1e-9 {
				t.Errorf("SD %g, gonum %g", p.ErrorStdDevPa, stat.StdDev(errs, nil))
			}
		}
	})
	t.Run("error is against the reference, not the nominal", func(t *testing.T) {
		pts := synth(2, func(p float64, _ int, _ Direction) float64 { return p + 100 })
		for i := range pts {
			pts[i].Reference.Mean += 3000 // the pressure landed 3 kPa off the nominal
			pts[i].DUT.Mean += 3000
		}
		res, err := Analyze(pts, dev16, ref16, opt)
		if err != nil {
			t.Fatal(err)
		}
		for _, p := range res.Points {
			if math.Abs(p.MeanErrorPa-100) > 1e-9 {
				t.Errorf("point %d: Δ %g, want 100", p.Index, p.MeanErrorPa)
			}
		}
	})
}

// The least-squares linearity equals gonum's regression on the point means
// (independent computation).
func TestLinearityAgainstGonum(t *testing.T) {
	res, err := Analyze(synth(2, func(p float64, c int, d Direction) float64 {
		return p + 3e-7*p*p/bar + float64(c)
	}), dev16, ref16, Options{Rule: RuleSimple, Linearity: []LinearityKind{LinearityLeastSquares}})
	if err != nil {
		t.Fatal(err)
	}
	var x, y []float64
	for _, p := range res.Points {
		x, y = append(x, p.ReferenceMeanPa), append(y, p.DUTMeanPa)
	}
	a, b := stat.LinearRegression(x, y, nil, false)
	l := res.Linearity[0]
	if len(res.Linearity) != 1 || math.Abs(l.Intercept-a) > 1e-7 || math.Abs(l.Slope-b) > 1e-13 {
		t.Errorf("ours %v, gonum a=%g b=%g", l.Line, a, b)
	}
}

func TestHeadCorrectionApplied(t *testing.T) {
	pts := synth(2, func(p float64, _ int, _ Direction) float64 { return p })
	ref := ref16
	// DUT 0.2 m below the reference, water: it sees (998.2 − 1.2)·g·0.2 more.
	ref.Head = HeadCorrection{FluidDensity: 998.2, AirDensity: 1.2, ZRef: 0.2, ZDUT: 0, HeightHalfWidth: 0.005, DensityHalfWidth: 1}
	res, err := Analyze(pts, dev16, ref, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	want := 997.0 * units.StandardGravity * 0.2
	if math.Abs(res.HeadCorrectionPa-want) > 1e-9 {
		t.Fatalf("head correction %g, want %g", res.HeadCorrectionPa, want)
	}
	for _, p := range res.Points {
		if math.Abs(p.MeanErrorPa+want) > 1e-9 {
			t.Errorf("point %d: Δ %g, want %g", p.Index, p.MeanErrorPa, -want)
		}
		n := len(p.Budget)
		if n != 12 || p.Budget[5].Name != "head_height" || math.Abs(p.Budget[5].StandardUncertaintyPa-997*units.StandardGravity*0.005/math.Sqrt(3)) > 1e-9 ||
			math.Abs(p.Budget[6].StandardUncertaintyPa-units.StandardGravity*0.2*1/math.Sqrt(3)) > 1e-9 {
			t.Errorf("point %d head budget %+v", p.Index, p.Budget)
		}
	}
}

func TestBadInput(t *testing.T) {
	good := synth(1, func(p float64, _ int, _ Direction) float64 { return p })
	mod := func(f func(p []Point) []Point) []Point {
		c := append([]Point(nil), good...)
		return f(c)
	}
	opt := Options{Rule: RuleSimple}
	cases := []struct {
		name string
		pts  []Point
		dev  Device
		ref  Reference
		opt  Options
		want string
	}{
		{"no points", nil, dev16, ref16, opt, "no points"},
		{"NaN DUT", mod(func(p []Point) []Point { p[3].DUT.Mean = math.NaN(); return p }), dev16, ref16, opt, "point 4"},
		{"Inf reference", mod(func(p []Point) []Point { p[2].Reference.Mean = math.Inf(-1); return p }), dev16, ref16, opt, "not a finite"},
		{"unknown direction", mod(func(p []Point) []Point { p[1].Direction = "sideways"; return p }), dev16, ref16, opt, "sideways"},
		{"unknown kind", mod(func(p []Point) []Point { p[1].Kind = ""; return p }), dev16, ref16, opt, "unknown kind"},
		{"duplicate reading", mod(func(p []Point) []Point { return append(p, p[4]) }), dev16, ref16, opt, "second up reading"},
		{"nominal mismatch", mod(func(p []Point) []Point { p[12].Nominal += 1; return p }), dev16, ref16, opt, "differs"},
		{"absurd pressure", mod(func(p []Point) []Point { p[5].DUT.Mean = 1e300; return p }), dev16, ref16, opt, "beyond any pressure"},
		{"cycle 0", mod(func(p []Point) []Point { p[0].Cycle = 0; return p }), dev16, ref16, opt, "cycle"},
		{"negative index", mod(func(p []Point) []Point { p[0].Index = -1; return p }), dev16, ref16, opt, "index"},
		{"empty window", mod(func(p []Point) []Point { p[0].DUT.Count = 0; return p }), dev16, ref16, opt, "samples"},
		{"only zeros", []Point{zeroPt(1, ZeroBefore, 0, 0)}, dev16, ref16, opt, "no measurement"},
		{"duplicate zero", append(mod(func(p []Point) []Point { return p }), zeroPt(1, ZeroBefore, 0, 0), zeroPt(1, ZeroBefore, 0, 0)), dev16, ref16, opt, "second zero-before"},
		{"zero span", good, Device{LowerPa: 5, UpperPa: 5, ResolutionPa: 1, Accuracy: Accuracy{EN837Class: 1}}, ref16, opt, "span"},
		{"no reference uncertainty", good, dev16, Reference{K: 2}, opt, "reference uncertainty"},
		{"no rule", good, dev16, ref16, Options{}, "no decision rule chosen"},
		{"bad rule", good, dev16, ref16, Options{Rule: "lenient"}, "unknown decision rule"},
		{"bad degree", good, dev16, ref16, Options{Rule: RuleSimple, CorrectionDegree: 4}, "degree"},
		{"bad linearity", good, dev16, ref16, Options{Rule: RuleSimple, Linearity: []LinearityKind{"wiggly"}}, "wiggly"},
		{"negative k", good, dev16, ref16, Options{Rule: RuleSimple, CoverageFactor: -2}, "coverage"},
		{"bad head", good, dev16, Reference{FloorPa: 1, K: 2, Head: HeadCorrection{ZRef: 1}}, opt, "fluid density"},
	}
	for _, c := range cases {
		_, err := Analyze(c.pts, c.dev, c.ref, c.opt)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one mentioning %q", c.name, err, c.want)
		}
	}
}

func TestWarnings(t *testing.T) {
	// One cycle, only up readings, poor reference, large down-up gap elsewhere.
	pts := synth(1, func(p float64, _ int, d Direction) float64 {
		if d == Descending {
			return p + 0.05*bar // 50 mbar > MPE 40 mbar for class 0.25 on 16 bar
		}
		return p
	})
	pts[3].Note = "approached from above"
	res, err := Analyze(pts, dev16, Reference{FloorPa: 0.02 * bar, K: 2}, Options{Rule: RuleGuarded})
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"only 2.00 times the reference", "hysteresis", "repeatability not evaluated", "approached from above", "the descending readings fail", "EN 837-1 practice"} {
		if !hasWarning(res, want) {
			t.Errorf("no warning containing %q in %q", want, res.Warnings)
		}
	}
}

func TestJSONSchema(t *testing.T) {
	pts := synth(3, func(p float64, c int, d Direction) float64 { return p + float64(c) })
	base := time.Date(2025, 3, 1, 20, 0, 0, 0, time.UTC)
	for i := range pts {
		pts[i].Reference.Start = base.Add(time.Duration(i) * time.Minute)
		pts[i].Reference.End = pts[i].Reference.Start.Add(30 * time.Second)
	}
	res, err := Analyze(pts, dev16, ref16, Options{Rule: RuleFourState, CorrectionDegree: 2})
	if err != nil {
		t.Fatal(err)
	}
	b, err := json.Marshal(res)
	if err != nil {
		t.Fatal(err)
	}
	for _, key := range []string{`"schema_version":2`, `"decision_rule":"four-state"`, `"mean_error_pa"`, `"expanded_uncertainty_pa"`,
		`"max_deviation_percent_span"`, `"coefficients_scaled"`, `"slope_pa_per_hour"`, `"standard_uncertainty_pa"`, `"deviation_pa"`} {
		if !strings.Contains(string(b), key) {
			t.Errorf("JSON lacks %s", key)
		}
	}
	var back Result
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	b2, _ := json.Marshal(back)
	if string(b) != string(b2) {
		t.Error("JSON does not round-trip")
	}
}

func TestDrift(t *testing.T) {
	// Error grows by exactly 2 Pa per cycle; cycles one hour apart.
	pts := synth(5, func(p float64, c int, _ Direction) float64 { return p + 2*float64(c) })
	base := time.Date(2025, 3, 1, 20, 0, 0, 0, time.UTC)
	for i := range pts {
		// Every reading of cycle c is stamped c hours after base; the
		// windows differ inside a cycle but average to the cycle's hour.
		off := time.Duration(pts[i].Index-4) * time.Minute
		if pts[i].Direction == Descending {
			off = -off
		}
		pts[i].Reference.Start = base.Add(time.Duration(pts[i].Cycle)*time.Hour + off)
		pts[i].Reference.End = pts[i].Reference.Start
	}
	for c := 1; c <= 5; c++ {
		z := zeroPt(c, ZeroBefore, 0, 1+0.5*float64(c))
		z.Reference.Start = base.Add(time.Duration(c)*time.Hour - 10*time.Minute)
		z.Reference.End = z.Reference.Start
		za := zeroPt(c, ZeroAfter, 0, 1.25+0.5*float64(c))
		za.Reference.Start = base.Add(time.Duration(c)*time.Hour + 10*time.Minute)
		za.Reference.End = za.Reference.Start
		pts = append(pts, z, za)
	}
	res, err := Analyze(pts, dev16, ref16, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	d := res.Drift
	if d == nil {
		t.Fatal("no drift section for five cycles")
	}
	for _, p := range d.Points {
		if p.Trend == nil || math.Abs(p.Trend.SlopePaPerHour-2) > 1e-9 || p.Trend.SlopeStdUncertaintyPerHour > 1e-9 || p.Trend.N != 5 {
			t.Errorf("point %d trend %+v", p.Index, p.Trend)
		}
		if math.Abs(p.LargestCycleChangePa-2) > 1e-9 || math.Abs(p.StdDevPa-math.Sqrt(10)) > 1e-9 {
			t.Errorf("point %d: change %g SD %g", p.Index, p.LargestCycleChangePa, p.StdDevPa)
		}
	}
	// Zero errors: 0.5 Pa per hour plus 0.25 Pa over 20 minutes inside each
	// cycle: a least-squares slope between the two, f0 = 0.25 Pa.
	if d.ZeroTrend == nil || d.ZeroTrend.N != 10 || d.ZeroTrend.SlopePaPerHour <= 0.5 || d.ZeroTrend.SlopePaPerHour >= 0.75 {
		t.Errorf("zero trend %+v", d.ZeroTrend)
	}
	if math.Abs(res.Zero.DeviationPa-0.25) > 1e-12 {
		t.Errorf("f0 %g", res.Zero.DeviationPa)
	}
	// One cycle: no drift section.
	one, _ := Analyze(synth(1, func(p float64, _ int, _ Direction) float64 { return p }), dev16, ref16, Options{Rule: RuleSimple})
	if one.Drift != nil {
		t.Error("drift for a single cycle")
	}
}

func TestCompare(t *testing.T) {
	found, err := Analyze(synth(2, func(p float64, _ int, _ Direction) float64 { return p*1.004 + 300 }), dev16, ref16, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	left, err := Analyze(synth(2, func(p float64, _ int, _ Direction) float64 { return p + 20 }), dev16, ref16, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	c, err := Compare(found, left)
	if err != nil {
		t.Fatal(err)
	}
	if found.Decision != Fail || c.AsFoundDecision != Fail || c.AsLeftDecision != Pass || len(c.Points) != 9 {
		t.Fatalf("comparison %+v", c)
	}
	for _, p := range c.Points {
		want := 20 - (p.NominalPa*0.004 + 300)
		if math.Abs(p.ErrorChangePa-want) > 1e-8 {
			t.Errorf("point %d change %g, want %g", p.Index, p.ErrorChangePa, want)
		}
	}
	if math.Abs(c.LargestChangePa()-(16*bar*0.004+280)) > 1e-8 {
		t.Errorf("largest change %g", c.LargestChangePa())
	}
	// A point missing from one side is named as the table numbers it, in the device's unit.
	dev := dev16
	dev.Unit = "bar"
	var partial []Point
	for _, p := range synth(2, func(p float64, _ int, _ Direction) float64 { return p + 20 }) {
		if p.Index != 4 {
			partial = append(partial, p)
		}
	}
	short, err := Analyze(partial, dev, ref16, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	if c, err := Compare(found, short); err != nil || len(c.Warnings) != 1 || c.Warnings[0] != "point 5 (8.0000 bar) has no as-left reading" {
		t.Errorf("warnings %q (%v)", c.Warnings, err)
	}
	other := dev16
	other.UpperPa = 25 * bar
	left.Device = other
	if _, err := Compare(found, left); err == nil {
		t.Error("compared results of different ranges")
	}
	if _, err := Compare(found, Result{}); err == nil {
		t.Error("compared with an empty result")
	}
}

// BenchmarkAnalyze100x21 is the overnight repeatability case: 100 cycles of
// 21 points up and down with zero readings.
func BenchmarkAnalyze100x21(b *testing.B) {
	var pts []Point
	base := time.Date(2025, 3, 1, 20, 0, 0, 0, time.UTC)
	for c := 1; c <= 100; c++ {
		pts = append(pts, zeroPt(c, ZeroBefore, 0, float64(c%3)))
		for _, d := range []Direction{Ascending, Descending} {
			for k := 0; k <= 20; k++ {
				i := k
				if d == Descending {
					i = 20 - k
				}
				p := float64(i) * 0.8 * bar
				x := pt(c, d, i, p, p+float64(c%7), p*1.0002+float64(c%5))
				x.Reference.Start = base.Add(time.Duration(len(pts)) * time.Minute)
				x.Reference.End = x.Reference.Start.Add(30 * time.Second)
				pts = append(pts, x)
			}
		}
		pts = append(pts, zeroPt(c, ZeroAfter, 0, float64(c%4)))
	}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Analyze(pts, dev16, ref16, Options{Rule: RuleFourState, CorrectionDegree: 3}); err != nil {
			b.Fatal(err)
		}
	}
}
