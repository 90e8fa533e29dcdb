package analysis

import (
	"encoding/json"
	"math"
	"strings"
	"testing"

	"plateau/analysis/units"
)

// class1 is a class 1, 0–16 bar gauge: MPE 0.16 bar (EN 837-1 Table 11, [C]).
var class1 = Device{LowerPa: 0, UpperPa: 16 * bar, ResolutionPa: 0.01 * bar, Accuracy: Accuracy{EN837Class: 1}}
var refClass1 = Reference{PercentOfReading: 0.01, FloorPa: 0.0005 * bar, K: 2}

// table builds cycles × (up, down) at 0, 4, 8, 12, 16 bar with the reference
// on the nominal; errs gives the DUT error in bar of each reading.
func table(cycles int, errs func(p float64, cycle int, d Direction) float64) []Point {
	var pts []Point
	for c := 1; c <= cycles; c++ {
		for i := 0; i <= 4; i++ {
			p := float64(i) * 4 * bar
			pts = append(pts, pt(c, Ascending, i, p, p, p+errs(p, c, Ascending)*bar))
		}
		for i := 4; i >= 0; i-- {
			p := float64(i) * 4 * bar
			pts = append(pts, pt(c, Descending, i, p, p, p+errs(p, c, Descending)*bar))
		}
	}
	return pts
}

// clean: +0.02 bar up, +0.04 bar down everywhere.
func cleanErr(_ float64, _ int, d Direction) float64 {
	if d == Ascending {
		return 0.02
	}
	return 0.04
}

// Sources of the rules under test, per case:
//   - each direction judged on its own: EN 837-1 applies the MPE with rising
//     and with falling pressure at every point (REFERENCES.md §2.1, from
//     memory [M]); the rules themselves: ILAC-G8:09/2019 §4.2.1 simple
//     acceptance, §4.2.2 guarded w = U, §4.2.3 four-state (REFERENCES.md §4, [C]);
//   - hysteresis of every cycle ≤ |MPE|: EN 837-1 (REFERENCES.md §2.1, from
//     memory [M]), under the same ILAC-G8 rules;
//   - a clean table passes under all three.
func TestVerdictEachDirectionAndCycle(t *testing.T) {
	cases := []struct {
		name string
		pts  []Point
		want Outcome // under every rule
		why  func(t *testing.T, r Result)
	}{
		{
			// The table: 8 bar up 8.10, down 8.21 (mean error
			// +0.155 bar within the 0.16 bar MPE, the descending reading out).
			name: "one direction out, mean within",
			pts: table(2, func(p float64, c int, d Direction) float64 {
				if p == 8*bar {
					if d == Ascending {
						return 0.10
					}
					return 0.21
				}
				return cleanErr(p, c, d)
			}),
			want: Fail,
			why: func(t *testing.T, r Result) {
				p := r.Points[2]
				if math.Abs(p.MeanErrorPa-0.155*bar) > 1e-6 || p.DownResult == nil || p.DownResult.Decision != Fail {
					t.Errorf("8 bar: mean %g Pa, down %+v", p.MeanErrorPa, p.DownResult)
				}
				if !hasWarning(r, "point 3 (8.00 bar): the descending readings fail (cycle 1 error +0.210 bar, MPE 0.160 bar") {
					t.Errorf("no warning in bar with the table's numbering: %q", r.Warnings)
				}
			},
		},
		{
			// Cycle 1 at 8 bar: −0.085 up, +0.085 down (h = 0.17 bar >
			// 0.16); cycles 2 and 3: ∓0.01 (h = 0.02). Average h = 0.07 bar.
			name: "one cycle's hysteresis over the MPE, average within",
			pts: table(3, func(p float64, c int, d Direction) float64 {
				if p != 8*bar {
					return cleanErr(p, c, d)
				}
				e := 0.01
				if c == 1 {
					e = 0.085
				}
				if d == Ascending {
					return -e
				}
				return e
			}),
			want: Fail,
			why: func(t *testing.T, r Result) {
				p := r.Points[2]
				if math.Abs(p.HysteresisPa-0.07*bar) > 1e-6 || p.HysteresisDecision != Fail || p.HysteresisCycles[0].Decision != Fail ||
					p.HysteresisCycles[1].Decision != Pass || p.UpResult.Decision != Pass || p.DownResult.Decision != Pass {
					t.Errorf("8 bar: h %g Pa, hysteresis %s, cycles %+v, up %+v, down %+v", p.HysteresisPa, p.HysteresisDecision, p.HysteresisCycles, p.UpResult, p.DownResult)
				}
			},
		},
		{name: "clean", pts: table(2, cleanErr), want: Pass},
	}
	for _, c := range cases {
		for _, rule := range []DecisionRule{RuleSimple, RuleGuarded, RuleFourState} {
			t.Run(c.name+"/"+string(rule), func(t *testing.T) {
				r, err := Analyze(c.pts, class1, refClass1, Options{Rule: rule, Unit: units.Bar})
				if err != nil {
					t.Fatal(err)
				}
				if r.Decision != c.want {
					t.Fatalf("verdict %s, want %s; warnings %q", r.Decision, c.want, r.Warnings)
				}
				if c.why != nil {
					c.why(t, r)
				}
			})
		}
	}
}

// The hysteresis limit is EN 837-1's only: an ASME grade sets none unless
// the device's own specification gives one (common practice: a limit not
// in the specification is not judged).
func TestHysteresisLimitOnlyWhereSpecified(t *testing.T) {
	pts := table(1, func(p float64, _ int, d Direction) float64 {
		if d == Ascending {
			return -0.09
		}
		return 0.09 // h = 0.18 bar
	})
	for _, c := range []struct {
		name string
		acc  Accuracy
		want Outcome
	}{
		{"EN 837-1 class 1 (MPE 0.16)", Accuracy{EN837Class: 1}, Fail},
		{"custom 1 % of span, no hysteresis limit", Accuracy{PercentOfSpan: 1}, Pass},
		{"custom 1 % of span, hysteresis ≤ 1 %", Accuracy{PercentOfSpan: 1, HysteresisPercentOfSpan: 1}, Fail},
		{"EN 837-1 class 1, hysteresis ≤ 1.25 % by the maker", Accuracy{EN837Class: 1, HysteresisPercentOfSpan: 1.25}, Pass},
	} {
		dev := class1
		dev.Accuracy = c.acc
		r, err := Analyze(pts, dev, refClass1, Options{Rule: RuleSimple})
		if err != nil {
			t.Fatal(err)
		}
		if r.Decision != c.want {
			t.Errorf("%s: %s, want %s", c.name, r.Decision, c.want)
		}
	}
}

// With unequal numbers of series the mean error is the midpoint of the
// two direction means (definition; common practice for the hysteresis term).
func TestMeanErrorIsMidpoint(t *testing.T) {
	pts := table(2, cleanErr)
	var kept []Point
	for _, p := range pts { // drop cycle 2's descending reading at 8 bar
		if !(p.Cycle == 2 && p.Direction == Descending && p.Index == 2) {
			kept = append(kept, p)
		}
	}
	r, err := Analyze(kept, class1, refClass1, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	if got := r.Points[2].MeanErrorPa; math.Abs(got-0.03*bar) > 1e-6 {
		t.Errorf("mean error %g Pa, want the midpoint 0.03 bar (mean of all three readings would be 0.0267)", got)
	}
}

// EURAMET cg-17 basic procedure (v2.0 and v4.1 §5.2.1, REFERENCES.md §1.2
// [C]): one cycle, repeatability from three ascending series at two points,
// applied to every point; U never below 0.2 % of full scale.
func TestBasicProcedure(t *testing.T) {
	pts := table(1, cleanErr)
	for c := 2; c <= 3; c++ { // repeats at 0 and 8 bar
		pts = append(pts, pt(c, Ascending, 0, 0, 0, 0.03*bar), pt(c, Ascending, 2, 8*bar, 8*bar, 8*bar+0.05*bar))
	}
	r, err := Analyze(pts, class1, refClass1, Options{Rule: RuleFourState})
	if err != nil {
		t.Fatal(err)
	}
	if !r.ShortProcedure || math.Abs(r.MinimumUncertaintyPa-0.032*bar) > 1e-6 {
		t.Fatalf("short %v, minimum %g Pa; want 0.2 %% of 16 bar = 0.032 bar", r.ShortProcedure, r.MinimumUncertaintyPa)
	}
	for _, p := range r.Points {
		want := 0.03 * bar // the largest found, at 8 bar, for the points without repeats
		if p.Index == 0 {
			want = 0.01 * bar // its own: 0.02, 0.03, 0.03
		}
		if math.Abs(p.RepeatabilityPa-want) > 1e-6 || !p.RepeatabilityEvaluated {
			t.Errorf("point %d: repeatability %g Pa, want %g", p.Index+1, p.RepeatabilityPa, want)
		}
		if p.ExpandedUncertaintyPa < 0.032*bar-1e-9 {
			t.Errorf("point %d: U %g Pa below the basic minimum", p.Index+1, p.ExpandedUncertaintyPa)
		}
	}
	if p := r.Points[1]; len(p.RepeatabilityFrom) != 2 || p.RepeatabilityFrom[0] != 1 || p.RepeatabilityFrom[1] != 3 || !p.MinimumApplied {
		t.Errorf("point 2 borrows from %v, minimum applied %v", p.RepeatabilityFrom, p.MinimumApplied)
	}
	if !hasWarning(r, "points 2, 4 and 5 have one series per direction") {
		t.Errorf("warnings %q", r.Warnings)
	}
}

// JCGM 100:2008 (GUM) Table G.2, Student's t for a coverage probability of
// 95.45 % (and two entries at 95 % and 99 %), printed to two decimals.
// Values from memory, not yet confirmed against the primary document.
func TestStudentTAgainstGUMTableG2(t *testing.T) {
	for _, c := range []struct{ p, nu, want float64 }{
		{95.45, 1, 13.97}, {95.45, 2, 4.53}, {95.45, 3, 3.31}, {95.45, 5, 2.65}, {95.45, 10, 2.28},
		{95.45, 16, 2.17}, {95.45, 20, 2.13}, {95.45, 50, 2.05}, {95.45, math.Inf(1), 2.00},
		{95, 16, 2.12}, {99, 16, 2.92},
	} {
		k, err := StudentT(c.p, c.nu)
		if err != nil || math.Abs(k-c.want) > 0.005 {
			t.Errorf("t_%g(%g) = %.4f (%v), table %.2f", c.p, c.nu, k, err, c.want)
		}
	}
	for _, bad := range []struct{ p, nu float64 }{{0, 5}, {100, 5}, {95, 0.5}, {95, math.NaN()}} {
		if _, err := StudentT(bad.p, bad.nu); err == nil {
			t.Errorf("StudentT(%g, %g) accepted", bad.p, bad.nu)
		}
	}
}

// JCGM 100:2008 (GUM) example H.1, calibration of an end gauge, Table H.1
// and H.1.6: contributions 25 nm (ν 18), 9.7 nm (ν 25.6), 2.9 nm (ν 50) and
// 16.6 nm (ν 2) give u_c = 32 nm, ν_eff = 16.7 → 16, t_99(16) = 2.92 and
// U_99 = 93 nm. Values from memory, not yet confirmed against the primary
// document. The printed u_c² = 1002 nm² comes from unrounded contributions;
// the rounded ones give 1003 nm², so ν_eff is checked within that rounding.
func TestWelchSatterthwaiteGUMH1(t *testing.T) {
	term := func(u, nu float64) Contribution {
		c := Contribution{Evaluated: true, StandardUncertaintyPa: u}
		if !math.IsInf(nu, 1) {
			c.DegreesOfFreedom = dof(nu)
		}
		return c
	}
	terms := []Contribution{term(25, 18), term(9.7, 25.6), term(2.9, 50), term(16.6, 2), term(0, math.Inf(1)),
		{Name: "not evaluated", StandardUncertaintyPa: 1000}} // must be ignored
	uc := combined(terms, "")
	if math.Round(uc) != 32 {
		t.Errorf("u_c = %.2f nm, printed 32 nm", uc)
	}
	nu := EffectiveDOF(terms)
	if math.Abs(nu-16.7) > 0.1 || math.Floor(nu) != 16 {
		t.Errorf("ν_eff = %.3f, printed 16.7 (16 used)", nu)
	}
	k, err := StudentT(99, math.Floor(nu))
	if err != nil || math.Abs(k-2.92) > 0.005 || math.Round(k*32) != 93 {
		t.Errorf("t_99(16) = %.4f, U_99 = %.1f nm; printed 2.92 and 93 nm", k, k*32)
	}
	if v := EffectiveDOF(terms[4:5]); !math.IsNaN(v) {
		t.Errorf("ν_eff of a zero budget %g, want NaN", v)
	}
	if v := EffectiveDOF([]Contribution{term(3, math.Inf(1))}); !math.IsInf(v, 1) {
		t.Errorf("ν_eff of Type B only %g, want +Inf", v)
	}
}

// The Student's t option in Analyze: ν_eff of the point budget by the same
// formula, k = t_95.45(⌊ν_eff⌋), and the repeatability term carries ν = n − 1.
func TestStudentTCoverageInAnalyze(t *testing.T) {
	pts := table(3, func(p float64, c int, d Direction) float64 { return 0.01 * float64(c) })
	r, err := Analyze(pts, class1, refClass1, Options{Rule: RuleSimple, Coverage: CoverageStudentT})
	if err != nil {
		t.Fatal(err)
	}
	p := r.Points[2]
	var rep Contribution
	for _, c := range p.Budget {
		if c.Name == "repeatability" {
			rep = c
		}
	}
	if rep.DegreesOfFreedom == nil || *rep.DegreesOfFreedom != 2 {
		t.Fatalf("repeatability ν %v, want 3 series − 1 = 2", rep.DegreesOfFreedom)
	}
	nu := EffectiveDOF(p.Budget)
	k, _ := StudentT(95.45, math.Floor(nu))
	if p.EffectiveDOF == nil || math.Abs(*p.EffectiveDOF-nu) > 1e-12 || math.Abs(p.CoverageFactor-k) > 1e-12 ||
		math.Abs(p.ExpandedUncertaintyPa-k*p.CombinedUncertaintyPa) > 1e-9 || k <= 2 {
		t.Errorf("ν_eff %v k %g U %g; want ν %g k %g", p.EffectiveDOF, p.CoverageFactor, p.ExpandedUncertaintyPa, nu, k)
	}
	if !strings.Contains(r.Coverage.Statement, "Student's t") || r.Coverage.Method != CoverageStudentT {
		t.Errorf("coverage %+v", r.Coverage)
	}
	if _, err := Analyze(pts, class1, refClass1, Options{Rule: RuleSimple, Coverage: CoverageStudentT, CoverageFactor: 2.2}); err == nil {
		t.Error("a fixed k together with Student's t was accepted")
	}
	conv, _ := Analyze(pts, class1, refClass1, Options{Rule: RuleSimple})
	if conv.Coverage.Probability != 95.45 || !strings.Contains(conv.Coverage.Statement, "k = 2") || conv.Points[2].EffectiveDOF != nil {
		t.Errorf("conventional coverage %+v", conv.Coverage)
	}
}

// Every budget line appears; a line without configuration says so, and the
// configured ones have the value their definition gives (common practice:
// rectangular half-width a → a/√3, resolution r → r/(2√3), window mean s/√n).
func TestBudgetTerms(t *testing.T) {
	pts := table(2, cleanErr)
	for i := range pts {
		pts[i].Reference.StdDev, pts[i].Reference.Count = 0.002*bar, 25
	}
	dev := class1
	dev.TempCoefficient, dev.ReferenceTemperatureC = 0.04, 20
	ref := refClass1
	ref.StabilityPercentOfReading, ref.StabilityFloorPa, ref.ResolutionPa = 0.01, 10, 1
	ambient := 23.0
	r, err := Analyze(pts, dev, ref, Options{Rule: RuleSimple, AmbientC: &ambient, InterpolationInBudget: true})
	if err != nil {
		t.Fatal(err)
	}
	p := r.Points[2] // 8 bar
	got := map[string]Contribution{}
	for _, c := range p.Budget {
		got[c.Name] = c
	}
	want := map[string]float64{
		"reference_stability":  (0.0001*8*bar + 10) / math.Sqrt(3),
		"reference_resolution": 1 / sqrt12,
		"reference_noise":      0.002 * bar / 5,
		"temperature":          0.0004 * 16 * bar * 3 / math.Sqrt(3),
		"interpolation":        r.Correction.MaxResidualPa / math.Sqrt(3),
	}
	for name, u := range want {
		c := got[name]
		if !c.Evaluated || math.Abs(c.StandardUncertaintyPa-u) > 1e-9 {
			t.Errorf("%s: %+v, want u = %g Pa", name, c, u)
		}
	}
	if c := got["reference_noise"]; c.DegreesOfFreedom == nil || *c.DegreesOfFreedom != 24 {
		t.Errorf("noise ν %v, want 24", c.DegreesOfFreedom)
	}
	// Nothing configured: every line still listed, marked not evaluated.
	bare, _ := Analyze(table(2, cleanErr), class1, refClass1, Options{Rule: RuleSimple})
	for _, c := range bare.Points[2].Budget {
		if want[c.Name] != 0 && (c.Evaluated || c.Note == "") {
			t.Errorf("unconfigured %s: %+v", c.Name, c)
		}
	}
	if len(bare.Points[2].Budget) != 12 {
		t.Errorf("%d budget lines, want 12", len(bare.Points[2].Budget))
	}
	noAmbient, _ := Analyze(table(2, cleanErr), dev, refClass1, Options{Rule: RuleSimple})
	for _, c := range noAmbient.Points[2].Budget {
		if c.Name == "temperature" && (c.Evaluated || !strings.Contains(c.Note, "ambient")) {
			t.Errorf("temperature without ambient: %+v", c)
		}
	}
}

// Gas density follows the absolute pressure: nitrogen at 20 °C, Δh = 0.1 m,
// air 1.2 kg/m³ → 10.1 Pa at 10 bar absolute and 111.5 Pa at 100 bar
// absolute (REFERENCES.md §6, [X]).
func TestGasHeadCorrection(t *testing.T) {
	h := HeadCorrection{AirDensity: 1.2, ZRef: 0.1, Gas: &Gas{MolarMass: 0.0280134, TemperatureK: 293.15, Absolute: true}}
	if err := h.Validate(); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct{ pAbs, want float64 }{{10 * bar, 10.1}, {100 * bar, 111.5}} {
		if got := h.At(c.pAbs); math.Abs(got-c.want) > 0.05 {
			t.Errorf("at %g bar abs: %.3f Pa, want %.1f", c.pAbs/bar, got, c.want)
		}
	}
	// In Analyze each reading gets its own correction.
	ref := refClass1
	ref.Head = h
	r, err := Analyze(table(1, cleanErr), class1, ref, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	lo, hi := r.Points[1].Readings[0].HeadCorrectionPa, r.Points[4].Readings[0].HeadCorrectionPa
	if !r.HeadVaries || !(hi > 3*lo) || math.Abs(lo-h.At(4*bar)) > 1e-9 {
		t.Errorf("head at 4 bar %g Pa, at 16 bar %g Pa, varies %v", lo, hi, r.HeadVaries)
	}
	for _, bad := range []Gas{{MolarMass: 0, TemperatureK: 293}, {MolarMass: 0.028, TemperatureK: 20}, {MolarMass: 0.028, TemperatureK: 293, Z: -1}} {
		g := bad
		if err := (HeadCorrection{ZRef: 1, Gas: &g}).Validate(); err == nil {
			t.Errorf("gas %+v accepted", bad)
		}
	}
}

// Figures that cannot be computed say so instead of showing 0.
func TestNotEvaluated(t *testing.T) {
	pts := []Point{pt(1, Ascending, 0, 4*bar, 4*bar, 4.01*bar), pt(1, Ascending, 1, 8*bar, 8*bar, 8.02*bar)}
	r, err := Analyze(pts, class1, refClass1, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	if r.Zero.Evaluated || r.Linearity != nil || r.Points[0].HysteresisEvaluated || r.Points[0].RepeatabilityEvaluated {
		t.Errorf("zero %+v, linearity %v, hysteresis %v, repeatability %v", r.Zero, r.Linearity, r.Points[0].HysteresisEvaluated, r.Points[0].RepeatabilityEvaluated)
	}
	if !hasWarning(r, "linearity not evaluated: 2 points, at least three are needed") {
		t.Errorf("warnings %q", r.Warnings)
	}
	b, _ := json.Marshal(r)
	if !strings.Contains(string(b), `"hysteresis_evaluated":false`) || !strings.Contains(string(b), `"evaluated":false`) {
		t.Error("JSON does not say what was not evaluated")
	}
}

// Without a rule nothing is decided, and the message says how to choose.
func TestNoDefaultRule(t *testing.T) {
	_, err := Analyze(table(1, cleanErr), class1, refClass1, Options{})
	if err == nil || !strings.Contains(err.Error(), "agree one with the customer before measuring (ILAC-G8:09/2019)") ||
		!strings.Contains(err.Error(), `"guarded"`) {
		t.Errorf("error %v", err)
	}
}

// Source: NIST StRD Norris certified standard deviations of the coefficients,
// sd(B0) = 0.232818234301152 and sd(B1) = 0.429796848199937E-03
// (REFERENCES.md §8.1, [C]), through the correction curve's power-series
// coefficient uncertainties.
func TestCorrectionCurveUncertaintyNorris(t *testing.T) {
	x, y := readNorris(t)
	c, err := correctionCurve(x, y, 1)
	if err != nil {
		t.Fatal(err)
	}
	for _, chk := range []struct {
		name      string
		got, want float64
	}{
		{"B0", c.PowerCoefficients[0], -0.262323073774029},
		{"B1", c.PowerCoefficients[1], 1.00211681802045},
		{"sd(B0)", c.CoefficientSD[0], 0.232818234301152},
		{"sd(B1)", c.CoefficientSD[1], 0.429796848199937e-03},
		{"residual SD", c.ResidualSDPa, 0.884796396144373},
	} {
		if d := sigDigits(chk.got, chk.want); d < 9 {
			t.Errorf("%s = %.15g, certified %.15g (%.1f digits)", chk.name, chk.got, chk.want, d)
		}
	}
	// Correlation of intercept and slope for OLS: −x̄/√(x̄² + Sxx/n), from the
	// data (own arithmetic [X]); symmetric with a unit diagonal.
	mx := mean(x)
	var sxx float64
	for _, v := range x {
		sxx += (v - mx) * (v - mx)
	}
	want := -mx / math.Sqrt(mx*mx+sxx/float64(len(x)))
	if r := c.Correlation; math.Abs(r[0][1]-want) > 1e-9 || math.Abs(r[1][0]-r[0][1]) > 1e-15 || math.Abs(r[0][0]-1) > 1e-12 {
		t.Errorf("correlation %v, want r01 %g", r, want)
	}
	if !c.InterpolationEvaluated || math.Abs(c.InterpolationPa-c.MaxResidualPa/math.Sqrt(3)) > 1e-12 {
		t.Errorf("interpolation %g", c.InterpolationPa)
	}
	exact, _ := correctionCurve([]float64{0, 1}, []float64{0, 2}, 1)
	if exact.InterpolationEvaluated || exact.CoefficientSD != nil {
		t.Error("a two-point line has no residual degrees of freedom to judge it by")
	}
}

// A run of several cycles that missed readings borrows the repeatability
// for the points left with one series per direction, but the basic
// procedure's minimum U does not apply to it (common practice: the minimum
// belongs to the one-cycle procedure of EURAMET cg-17 §5.2.1).
func TestMissedReadingsAreNotTheBasicProcedure(t *testing.T) {
	var pts []Point
	for _, p := range table(3, func(_ float64, c int, _ Direction) float64 { return 0.01 * float64(c) }) {
		if !(p.Index == 2 && p.Cycle > 1) { // 8 bar measured in cycle 1 only
			pts = append(pts, p)
		}
	}
	r, err := Analyze(pts, class1, refClass1, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	p := r.Points[2]
	if r.ShortProcedure || r.MinimumUncertaintyPa != 0 || p.MinimumApplied || len(p.RepeatabilityFrom) != 4 || math.Abs(p.RepeatabilityPa-0.02*bar) > 1e-6 {
		t.Errorf("short %v, minimum %g, point 3: %+v", r.ShortProcedure, r.MinimumUncertaintyPa, p)
	}
	if !hasWarning(r, "point 3 has one series per direction") || !hasWarning(r, "U keeps its own value") {
		t.Errorf("warnings %q", r.Warnings)
	}
}
