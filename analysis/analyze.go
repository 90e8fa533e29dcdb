package analysis

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"time"

	"plateau/analysis/readout"
	"plateau/analysis/units"
)

// LinearityKind names a form of linearity (ISA-51.1 terms where it has them).
type LinearityKind string

const (
	LinearityTerminal     LinearityKind = "terminal"      // line through the end points
	LinearityZeroBased    LinearityKind = "zero-based"    // through the lowest point, tilted for least maximum deviation
	LinearityLeastSquares LinearityKind = "least-squares" // best-fit straight line
	LinearityIndependent  LinearityKind = "independent"   // minimax line
)

var allLinearity = []LinearityKind{LinearityTerminal, LinearityZeroBased, LinearityLeastSquares, LinearityIndependent}

// Options choose how a run is evaluated. Zero values take the defaults noted.
type Options struct {
	// Rule is required: ISO/IEC 17025 wants it agreed before measuring, so
	// there is no silent default.
	Rule DecisionRule `json:"decision_rule"`
	// Coverage chooses how k is found; empty means CoverageConventional.
	Coverage CoverageMethod `json:"coverage_method,omitempty"`
	// CoverageFactor k of the conventional method; 0 means 2.
	CoverageFactor float64 `json:"coverage_factor"`
	// Linearity lists the forms to compute; empty means all four.
	Linearity []LinearityKind `json:"linearity"`
	// CorrectionDegree is the degree (1–3) of the correction curve; 0 means 1.
	CorrectionDegree int `json:"correction_degree"`
	// ReferenceRatioThreshold: below this MPE / U_reference a warning is
	// raised; 0 means 4 (the 4 : 1 practice).
	ReferenceRatioThreshold float64 `json:"reference_ratio_threshold"`
	// InterpolationInBudget adds the correction curve's interpolation term
	// to every point's budget, for a certificate whose users correct
	// readings between the points with the curve.
	InterpolationInBudget bool `json:"interpolation_in_budget,omitempty"`
	// AmbientC is the ambient temperature recorded during the run, °C; nil
	// when none was recorded (the temperature term is then not evaluated).
	AmbientC *float64 `json:"ambient_c,omitempty"`
	// Unit is the display unit of the messages; the zero Unit means the
	// device's own unit (Device.Unit), else pascal.
	Unit units.Unit `json:"-"`
}

func (o Options) withDefaults() (Options, error) {
	if err := o.Rule.validate(); err != nil {
		return o, err
	}
	switch o.Coverage {
	case "":
		o.Coverage = CoverageConventional
	case CoverageConventional:
	case CoverageStudentT:
		if o.CoverageFactor != 0 {
			return o, fmt.Errorf("coverage factor %g and %q both given: Student's t chooses k itself", o.CoverageFactor, CoverageStudentT)
		}
	default:
		return o, fmt.Errorf("unknown coverage method %q (one of %q, %q)", o.Coverage, CoverageConventional, CoverageStudentT)
	}
	if o.CoverageFactor == 0 {
		o.CoverageFactor = 2
	}
	if !finite(o.CoverageFactor) || o.CoverageFactor <= 0 {
		return o, fmt.Errorf("coverage factor %g: must be > 0", o.CoverageFactor)
	}
	if len(o.Linearity) == 0 {
		o.Linearity = allLinearity
	}
	for _, k := range o.Linearity {
		known := false
		for _, a := range allLinearity {
			known = known || k == a
		}
		if !known {
			return o, fmt.Errorf("unknown linearity kind %q (one of %q, %q, %q, %q)", k, allLinearity[0], allLinearity[1], allLinearity[2], allLinearity[3])
		}
	}
	if o.CorrectionDegree == 0 {
		o.CorrectionDegree = 1
	}
	if o.CorrectionDegree < 1 || o.CorrectionDegree > 3 {
		return o, fmt.Errorf("correction curve degree %d: must be 1, 2 or 3", o.CorrectionDegree)
	}
	if o.ReferenceRatioThreshold == 0 {
		o.ReferenceRatioThreshold = 4
	}
	if !finite(o.ReferenceRatioThreshold) || o.ReferenceRatioThreshold < 0 {
		return o, fmt.Errorf("reference ratio threshold %g: must be ≥ 0", o.ReferenceRatioThreshold)
	}
	if o.AmbientC != nil && (!finite(*o.AmbientC) || *o.AmbientC < -273.15) {
		return o, fmt.Errorf("ambient temperature %g °C: must be a finite temperature", *o.AmbientC)
	}
	if o.Unit.Pa == 0 {
		o.Unit = units.Pascal
	}
	return o, nil
}

// reading is one validated measurement with its head-corrected reference.
type reading struct {
	cycle int
	dir   Direction
	ref   float64
	dut   float64
	head  float64 // the head correction included in ref
	refSD float64 // sample SD of the reference's settled window
	refN  int     // samples in that window
	t     time.Time
	// ambientC is the ambient temperature over the reading's window, °C,
	// when an ambient instrument measured it (hasAmbientC).
	ambientC    float64
	hasAmbientC bool
}

func (r reading) err() float64 { return r.dut - r.ref }

// seriesKey identifies a series (measurement) or a zero reading (kind) in a cycle.
type seriesKey struct {
	cycle int
	what  string
}

// group gathers the readings of one Index.
type group struct {
	nominal  float64
	readings []reading
	seen     map[seriesKey]int // → reading number
}

// describe names an input reading by its place in the input and the
// table's point numbering (Index + 1).
func describe(i int, p Point) string {
	if p.Kind != Measurement {
		return fmt.Sprintf("reading %d (cycle %d, %s)", i+1, p.Cycle, p.Kind)
	}
	return fmt.Sprintf("reading %d (cycle %d, %s, point %d)", i+1, p.Cycle, p.Direction, p.Index+1)
}

// readingTime is the middle of the reference window, else of the DUT
// window, else zero (no time recorded).
func readingTime(p Point) time.Time {
	for _, w := range []Window{p.Reference, p.DUT} {
		if !w.Start.IsZero() && !w.End.IsZero() {
			return w.Start.Add(w.End.Sub(w.Start) / 2)
		}
	}
	return time.Time{}
}

// maxPressurePa bounds readings (1 TPa, far above any gauge) so that sums
// of squares can never overflow into an Inf that JSON cannot carry.
const maxPressurePa = 1e12

func validatePoint(i int, p Point) error {
	if err := checkPoint(p); err != nil {
		return fmt.Errorf("%s: %w", describe(i, p), err)
	}
	return nil
}

func checkPoint(p Point) error {
	if p.Cycle < 1 {
		return fmt.Errorf("cycle must be 1 or more")
	}
	switch p.Kind {
	case Measurement:
		if p.Direction != Ascending && p.Direction != Descending {
			return fmt.Errorf("direction %q is neither %q nor %q", p.Direction, Ascending, Descending)
		}
		if p.Index < 0 {
			return fmt.Errorf("index must be 0 or more")
		}
	case ZeroBefore, ZeroAfter:
		if p.Direction != "" && p.Direction != Ascending && p.Direction != Descending {
			return fmt.Errorf("unknown direction %q", p.Direction)
		}
	default:
		return fmt.Errorf("unknown kind %q (one of %q, %q, %q)", p.Kind, Measurement, ZeroBefore, ZeroAfter)
	}
	for _, c := range []struct {
		name string
		w    Window
	}{{"reference", p.Reference}, {"DUT", p.DUT}} {
		if !finite(c.w.Mean) {
			return fmt.Errorf("%s reading %g is not a finite number", c.name, c.w.Mean)
		}
		if math.Abs(c.w.Mean) > maxPressurePa {
			return fmt.Errorf("%s reading %g Pa is beyond any pressure instrument (limit %g Pa)", c.name, c.w.Mean, maxPressurePa)
		}
		if c.w.Count < 1 {
			return fmt.Errorf("%s window holds %d samples; a captured reading needs at least one", c.name, c.w.Count)
		}
		if !finite(c.w.StdDev) || c.w.StdDev < 0 || c.w.StdDev > maxPressurePa {
			return fmt.Errorf("%s window standard deviation %g Pa: must be a finite number ≥ 0", c.name, c.w.StdDev)
		}
	}
	if !finite(p.Nominal) || math.Abs(p.Nominal) > maxPressurePa {
		return fmt.Errorf("nominal %g Pa is not a finite pressure within ±%g Pa", p.Nominal, maxPressurePa)
	}
	return validateAmbient(p)
}

// basicMinimumPercent is the smallest expanded uncertainty the basic
// calibration procedure may report, % of full scale (EURAMET cg-17 v2.0 and
// v4.1 §5.2.1, REFERENCES.md §1.2 [C]). We take full scale as the span,
// which is the same for ranges that start at zero.
const basicMinimumPercent = 0.2

// Analyze evaluates a calibration run. It never panics on bad input: every
// problem comes back as an error naming the offending reading or setting.
//
// Definitions (pressures in Pa; e = DUT − head-corrected reference of the
// same reading, never against the nominal):
//   - direction mean: the mean of e over that direction's series; mean
//     error Δ = the midpoint of the ascending and descending means (one
//     direction's mean when only one was measured), so a missed reading or
//     an extra ascending series does not tilt Δ; correction −Δ;
//   - hysteresis h = mean over the cycles that have both an up and a down
//     reading of |e_down − e_up| (errors, not indications, so that small
//     differences of the applied pressure between the two do not count);
//     each cycle's value is kept and judged against the hysteresis limit;
//   - repeatability b = the larger over the two directions of the range
//     (max − min) of e over that direction's series; a point without a
//     repeated series takes the largest b found at the points that have one
//     (the basic procedure), and U is then never below 0.2 % of span;
//   - zero deviation f₀ = the largest |e_after − e_before| of a cycle,
//     applied at every point;
//   - budget: reference U_ref/k_ref (normal), resolution r, f₀, b and h each
//     rectangular with divisor 2√3, head correction half-widths with divisor
//     √3, and the optional terms of the reference (stability, resolution,
//     settled-window noise), the temperature effect and the interpolation
//     term; u_c = √Σu², U = k·u_c, error span |Δ| + U;
//   - decision (ILAC-G8): every reading of each direction against the MPE
//     with that direction's U (the budget without the hysteresis term), the
//     mean against the MPE with U, and each cycle's hysteresis against the
//     hysteresis limit; the point takes the worst.
func Analyze(points []Point, dev Device, ref Reference, opt Options) (Result, error) {
	if err := dev.Validate(); err != nil {
		return Result{}, err
	}
	if err := ref.Validate(); err != nil {
		return Result{}, err
	}
	if err := ref.Head.Validate(); err != nil {
		return Result{}, err
	}
	if opt.Unit.Pa == 0 {
		opt.Unit, _ = units.Lookup(dev.Unit) // an unknown symbol leaves the zero Unit: pascal
	}
	opt, err := opt.withDefaults()
	if err != nil {
		return Result{}, fmt.Errorf("options: %w", err)
	}
	if len(points) == 0 {
		return Result{}, errors.New("no points to analyse")
	}
	say := messages{opt.Unit, dev.ResolutionPa}
	headAt := func(p float64) float64 {
		if !ref.Head.enabled() {
			return 0
		}
		return ref.Head.At(p)
	}

	groups := map[int]*group{}
	var zeros []zeroReading
	zeroSeen := map[seriesKey]int{}
	cycleSet := map[int]bool{}
	var warnings []string
	for i, p := range points {
		if err := validatePoint(i, p); err != nil {
			return Result{}, err
		}
		if p.Note != "" {
			warnings = append(warnings, fmt.Sprintf("%s: %s", describe(i, p), p.Note))
		}
		head := headAt(p.Reference.Mean)
		e := p.DUT.Mean - (p.Reference.Mean + head)
		if p.Kind != Measurement {
			key := seriesKey{p.Cycle, string(p.Kind)}
			if j, dup := zeroSeen[key]; dup {
				return Result{}, fmt.Errorf("%s: a second %s reading in cycle %d (first was reading %d)", describe(i, p), p.Kind, p.Cycle, j+1)
			}
			zeroSeen[key] = i
			zeros = append(zeros, zeroReading{cycle: p.Cycle, before: p.Kind == ZeroBefore, err: e, t: readingTime(p)})
			continue
		}
		cycleSet[p.Cycle] = true
		g := groups[p.Index]
		if g == nil {
			g = &group{nominal: p.Nominal, seen: map[seriesKey]int{}}
			groups[p.Index] = g
		}
		if p.Nominal != g.nominal {
			return Result{}, fmt.Errorf("%s: nominal %s differs from %s given earlier for point %d", describe(i, p), say.p(p.Nominal), say.p(g.nominal), p.Index+1)
		}
		key := seriesKey{p.Cycle, string(p.Direction)}
		if j, dup := g.seen[key]; dup {
			return Result{}, fmt.Errorf("%s: a second %s reading at point %d in cycle %d (first was reading %d)", describe(i, p), p.Direction, p.Index+1, p.Cycle, j+1)
		}
		g.seen[key] = i
		r := reading{cycle: p.Cycle, dir: p.Direction, ref: p.Reference.Mean + head, dut: p.DUT.Mean,
			head: head, refSD: p.Reference.StdDev, refN: p.Reference.Count, t: readingTime(p)}
		r.ambientC, r.hasAmbientC = temperatureOf(p)
		g.readings = append(g.readings, r)
	}
	if len(groups) == 0 {
		return Result{}, errors.New("no measurement points: only zero readings were given")
	}

	res := Result{
		SchemaVersion:    SchemaVersion,
		DecisionRule:     opt.Rule,
		TieRule:          TieRule,
		Coverage:         coverageStatement(opt),
		Device:           dev,
		Reference:        ref,
		HeadCorrectionPa: headAt(0),
		HeadVaries:       ref.Head.Gas != nil,
		Cycles:           len(cycleSet),
		Decision:         Pass,
	}
	indices := make([]int, 0, len(groups))
	for idx := range groups {
		indices = append(indices, idx)
	}
	sort.Ints(indices)
	readingsByPoint := make([][]reading, len(indices))
	for n, idx := range indices {
		rs := groups[idx].readings
		sort.Slice(rs, func(a, b int) bool {
			if rs[a].cycle != rs[b].cycle {
				return rs[a].cycle < rs[b].cycle
			}
			return rs[a].dir == Ascending && rs[b].dir == Descending
		})
		readingsByPoint[n] = rs
	}

	if len(zeros) == 0 {
		zeros = zerosFromNominalZero(indices, groups, readingsByPoint)
	}
	res.Zero = zeroDeviation(zeros)
	if !res.Zero.Evaluated {
		warnings = append(warnings, "zero deviation not evaluated: no cycle has a zero reading both before and after; its budget term is left out")
	}

	span := dev.Span()
	// First the figures that need no uncertainty: means, hysteresis, repeatability.
	res.Points = make([]PointResult, len(indices))
	for n, idx := range indices {
		res.Points[n] = describePoint(idx, groups[idx].nominal, readingsByPoint[n], dev)
	}
	warnings = append(warnings, shortProcedure(&res, say)...)

	xs, ys := make([]float64, len(res.Points)), make([]float64, len(res.Points))
	for i, p := range res.Points {
		xs[i], ys[i] = p.ReferenceMeanPa, p.DUTMeanPa
	}
	if len(xs) < 3 {
		warnings = append(warnings, fmt.Sprintf("linearity not evaluated: %s, at least three are needed", plural(len(xs), "point")))
	} else if lin, err := linearities(xs, ys, span, opt.Linearity); err != nil {
		warnings = append(warnings, "linearity not evaluated: "+err.Error())
	} else {
		res.Linearity = lin
	}
	if cc, err := correctionCurve(ys, xs, opt.CorrectionDegree); err != nil {
		warnings = append(warnings, "correction curve not fitted: "+err.Error())
	} else {
		res.Correction = cc
	}

	minRef, minExp := math.Inf(1), math.Inf(1)
	anyHyst := false
	for n := range res.Points {
		pr := &res.Points[n]
		judgePoint(pr, readingsByPoint[n], dev, ref, opt, res)
		anyHyst = anyHyst || pr.HysteresisEvaluated
		res.Decision = Worse(res.Decision, pr.Decision)
		res.CoverageFactor = math.Max(res.CoverageFactor, pr.CoverageFactor)
		res.MaxAbsErrorPa = math.Max(res.MaxAbsErrorPa, math.Abs(pr.MeanErrorPa))
		res.MaxErrorSpanPa = math.Max(res.MaxErrorSpanPa, pr.ErrorSpanPa)
		res.MaxHysteresisPa = math.Max(res.MaxHysteresisPa, pr.HysteresisPa)
		res.MaxRepeatabilityPa = math.Max(res.MaxRepeatabilityPa, pr.RepeatabilityPa)
		if pr.ReferenceRatio != nil {
			minRef = math.Min(minRef, *pr.ReferenceRatio)
		}
		if pr.ExpandedRatio != nil {
			minExp = math.Min(minExp, *pr.ExpandedRatio)
		}
		warnings = append(warnings, pointWarnings(*pr, dev, opt, say)...)
	}
	res.MaxErrorSpanPercentSpan = res.MaxErrorSpanPa / span * 100
	if !math.IsInf(minRef, 1) {
		res.MinReferenceRatio = &minRef
		if minRef < opt.ReferenceRatioThreshold {
			warnings = append(warnings, fmt.Sprintf("the permissible error is only %.2f times the reference's own expanded uncertainty, below the %g : 1 practice", minRef, opt.ReferenceRatioThreshold))
		}
	}
	if !math.IsInf(minExp, 1) {
		res.MinExpandedRatio = &minExp
	}
	if !anyHyst {
		warnings = append(warnings, "hysteresis not evaluated: no cycle has both an up and a down reading at any point; its budget term is left out")
	}
	if c := dev.Accuracy.EN837Class; c != 0 {
		// At least 10 points for classes 0.1–0.6 and 5 for 1–4: a gauge
		// maker's EN 837 testing instructions (REFERENCES.md §2.1, [C-sec]).
		need := 5
		if c <= 0.6 {
			need = 10
		}
		if len(indices) < need {
			warnings = append(warnings, fmt.Sprintf("%s: EN 837-1 practice for class %g is at least %d", plural(len(indices), "measuring point"), c, need))
		}
	}
	if res.Cycles >= 2 {
		res.Drift = drift(res.Points, zeros)
	}
	amb, ambWarnings := ambientSummary(points, res)
	res.Ambient, warnings = amb, append(warnings, ambWarnings...)
	res.Warnings = append([]string{}, warnings...)
	if err := withOutput(&res, points, dev, opt); err != nil {
		return Result{}, err
	}
	return res, nil
}

// zeroReading is the error (DUT − reference) at a zero reading.
type zeroReading struct {
	cycle    int
	before   bool
	err      float64
	t        time.Time
	fallback bool // taken from the measurement at nominal 0 Pa
}

// zerosFromNominalZero stands in for missing zero readings: a range that
// includes 0 Pa reads its zero as the up and the down measurement at nominal
// 0 Pa of each cycle (before and after the cycle's pressure excursion).
func zerosFromNominalZero(indices []int, groups map[int]*group, readings [][]reading) []zeroReading {
	for n, idx := range indices {
		if groups[idx].nominal != 0 {
			continue
		}
		var out []zeroReading
		for _, r := range readings[n] {
			out = append(out, zeroReading{cycle: r.cycle, before: r.dir == Ascending, err: r.err(), t: r.t, fallback: true})
		}
		return out
	}
	return nil
}

// zeroDeviation collects each cycle's zero errors and f₀ = the largest
// |after − before| of a cycle.
func zeroDeviation(zeros []zeroReading) ZeroDeviation {
	z := ZeroDeviation{Source: "none", Cycles: []ZeroCycle{}}
	byCycle := map[int]*ZeroCycle{}
	for _, zr := range zeros {
		zc := byCycle[zr.cycle]
		if zc == nil {
			zc = &ZeroCycle{Cycle: zr.cycle}
			byCycle[zr.cycle] = zc
		}
		e := zr.err
		if zr.before {
			zc.BeforeErrorPa = &e
		} else {
			zc.AfterErrorPa = &e
		}
	}
	cycles := make([]int, 0, len(byCycle))
	for c := range byCycle {
		cycles = append(cycles, c)
	}
	sort.Ints(cycles)
	for _, c := range cycles {
		zc := *byCycle[c]
		if zc.BeforeErrorPa != nil && zc.AfterErrorPa != nil {
			d := *zc.AfterErrorPa - *zc.BeforeErrorPa
			zc.ChangePa = &d
			z.DeviationPa = math.Max(z.DeviationPa, math.Abs(d))
			z.Evaluated = true
			z.Source = "zero-readings"
			if zeros[0].fallback {
				z.Source = "nominal-zero-points"
			}
		}
		z.Cycles = append(z.Cycles, zc)
	}
	return z
}

// describePoint computes what does not depend on the uncertainty: the
// direction summaries, the means, the hysteresis of each cycle and the
// point's own repeatability.
func describePoint(idx int, nominal float64, rs []reading, dev Device) PointResult {
	pr := PointResult{Index: idx, NominalPa: nominal, Readings: make([]SeriesReading, len(rs)), HysteresisCycles: []HysteresisCycle{}}
	errs := make([]float64, 0, len(rs))
	byDir := map[Direction][]reading{}
	upErr := map[int]float64{}
	for i, r := range rs {
		e := r.err()
		pr.Readings[i] = SeriesReading{Cycle: r.cycle, Direction: r.dir, ReferencePa: r.ref, DUTPa: r.dut, ErrorPa: e, HeadCorrectionPa: r.head, Time: r.t}
		errs = append(errs, e)
		byDir[r.dir] = append(byDir[r.dir], r)
		if r.dir == Ascending {
			upErr[r.cycle] = e
		}
	}
	pr.Up, pr.Down = summarise(byDir[Ascending]), summarise(byDir[Descending])
	switch {
	case pr.Up != nil && pr.Down != nil:
		pr.ReferenceMeanPa = (pr.Up.ReferenceMeanPa + pr.Down.ReferenceMeanPa) / 2
		pr.DUTMeanPa = (pr.Up.DUTMeanPa + pr.Down.DUTMeanPa) / 2
		pr.MeanErrorPa = (pr.Up.MeanErrorPa + pr.Down.MeanErrorPa) / 2
	case pr.Up != nil:
		pr.ReferenceMeanPa, pr.DUTMeanPa, pr.MeanErrorPa = pr.Up.ReferenceMeanPa, pr.Up.DUTMeanPa, pr.Up.MeanErrorPa
	default:
		pr.ReferenceMeanPa, pr.DUTMeanPa, pr.MeanErrorPa = pr.Down.ReferenceMeanPa, pr.Down.DUTMeanPa, pr.Down.MeanErrorPa
	}
	pr.CorrectionPa = -pr.MeanErrorPa
	pr.ErrorPercentSpan = pr.MeanErrorPa / dev.Span() * 100
	pr.ErrorStdDevPa = sampleSD(errs)

	var hsum float64
	for _, r := range byDir[Descending] {
		if eu, ok := upErr[r.cycle]; ok {
			h := math.Abs(r.err() - eu)
			hsum += h
			pr.HysteresisCycles = append(pr.HysteresisCycles, HysteresisCycle{Cycle: r.cycle, HysteresisPa: h})
		}
	}
	if n := len(pr.HysteresisCycles); n > 0 {
		pr.HysteresisPa = hsum / float64(n)
		pr.HysteresisEvaluated = true
	}
	for _, s := range []*SeriesSummary{pr.Up, pr.Down} {
		if s != nil && s.Series >= 2 {
			pr.RepeatabilityPa = math.Max(pr.RepeatabilityPa, s.ErrorRangePa)
			pr.RepeatabilityEvaluated = true
		}
	}
	return pr
}

// repeatSeries is the number of series behind a point's own repeatability:
// that of the direction with the larger range (ν = n − 1 as a Type A term).
func repeatSeries(pr PointResult) int {
	n, best := 0, -1.0
	for _, s := range []*SeriesSummary{pr.Up, pr.Down} {
		if s != nil && s.Series >= 2 && s.ErrorRangePa > best {
			n, best = s.Series, s.ErrorRangePa
		}
	}
	return n
}

// shortProcedure handles runs in which some point has no repeated series
// (the basic procedure of EURAMET cg-17 §5.2.1: one cycle, repeats at a
// few points, REFERENCES.md §1.2 [C]): the largest repeatability found is
// applied to the points without one, and U gets the procedure's minimum.
//
// The minimum belongs to that one-cycle procedure: a run of several cycles
// that lost a reading here and there borrows the repeatability but keeps
// its own U.
func shortProcedure(res *Result, say messages) []string {
	var with, without []int
	best := -1.0
	downSeries := 0
	for _, p := range res.Points {
		if p.Down != nil {
			downSeries = max(downSeries, p.Down.Series)
		}
		if p.RepeatabilityEvaluated {
			with = append(with, p.Index+1)
			best = math.Max(best, p.RepeatabilityPa)
		} else {
			without = append(without, p.Index+1)
		}
	}
	if len(without) == 0 {
		return nil
	}
	floor := "U keeps its own value (several cycles: not the basic procedure)"
	if downSeries <= 1 {
		res.ShortProcedure = true
		res.MinimumUncertaintyPa = basicMinimumPercent / 100 * res.Device.Span()
		floor = fmt.Sprintf("U is never below %s (%g %% of span, the minimum of the basic procedure, EURAMET cg-17)", say.p(res.MinimumUncertaintyPa), basicMinimumPercent)
	}
	if len(with) == 0 {
		return []string{"repeatability not evaluated: no point has two series in the same direction (the basic procedure repeats an ascending series three times at two points); " + floor}
	}
	for i := range res.Points {
		p := &res.Points[i]
		if !p.RepeatabilityEvaluated {
			p.RepeatabilityPa = best
			p.RepeatabilityEvaluated = true
			p.RepeatabilityFrom = with
		}
	}
	subject := "points " + numberList(without) + " have"
	if len(without) == 1 {
		subject = "point " + numberList(without) + " has"
	}
	return []string{fmt.Sprintf("%s one series per direction: the largest repeatability %s, found at %s, is applied; %s",
		subject, say.p(best), pointsWord(with), floor)}
}

var sqrt12 = 2 * math.Sqrt(3)

// judgePoint builds the budget and the expanded uncertainties of a point
// and decides it: each direction, the mean and each cycle's hysteresis.
func judgePoint(pr *PointResult, rs []reading, dev Device, ref Reference, opt Options, res Result) {
	pr.Budget = budget(*pr, rs, dev, ref, opt, res)
	pr.CombinedUncertaintyPa = combined(pr.Budget, "")
	k, nu := coverageFor(opt, pr.Budget, "")
	pr.CoverageFactor, pr.EffectiveDOF = k, nu
	pr.ExpandedUncertaintyPa = k * pr.CombinedUncertaintyPa
	if pr.ExpandedUncertaintyPa < res.MinimumUncertaintyPa {
		pr.ExpandedUncertaintyPa = res.MinimumUncertaintyPa
		pr.MinimumApplied = true
	}
	pr.ErrorSpanPa = math.Abs(pr.MeanErrorPa) + pr.ExpandedUncertaintyPa
	pr.MPEPa = dev.MPE(pr.ReferenceMeanPa)
	pr.AcceptanceLimitPa = AcceptanceLimit(opt.Rule, pr.MPEPa, pr.ExpandedUncertaintyPa)
	pr.Decision = Decide(opt.Rule, math.Abs(pr.MeanErrorPa), pr.MPEPa, pr.ExpandedUncertaintyPa)

	// A single reading of one direction is not a mean of up and down, so
	// the hysteresis term does not belong to its uncertainty.
	kd, _ := coverageFor(opt, pr.Budget, "hysteresis")
	uDir := math.Max(kd*combined(pr.Budget, "hysteresis"), res.MinimumUncertaintyPa)
	for _, dir := range []Direction{Ascending, Descending} {
		var d *DirectionResult
		for _, r := range rs {
			if r.dir != dir {
				continue
			}
			if d == nil {
				d = &DirectionResult{ExpandedUncertaintyPa: uDir, Decision: Pass, WorstCycle: r.cycle, WorstErrorPa: r.err()}
			}
			if math.Abs(r.err()) > math.Abs(d.WorstErrorPa) {
				d.WorstErrorPa, d.WorstCycle = r.err(), r.cycle
			}
			d.Decision = Worse(d.Decision, Decide(opt.Rule, math.Abs(r.err()), pr.MPEPa, uDir))
		}
		if d == nil {
			continue
		}
		if dir == Ascending {
			pr.UpResult = d
		} else {
			pr.DownResult = d
		}
		pr.Decision = Worse(pr.Decision, d.Decision)
	}

	// The hysteresis of a cycle is the difference of two readings of the
	// same device at the same reference point: the reference's certificate
	// uncertainty is common to both and cancels, what remains is the
	// resolution of the two readings, u(h) = √2 · r/(2√3).
	if limit, ok := dev.HysteresisLimit(pr.ReferenceMeanPa); ok && pr.HysteresisEvaluated {
		pr.HysteresisLimitPa = &limit
		uh := opt.CoverageFactor * math.Sqrt2 * dev.ResolutionPa / sqrt12
		pr.HysteresisDecision = Pass
		for i := range pr.HysteresisCycles {
			c := &pr.HysteresisCycles[i]
			c.Decision = Decide(opt.Rule, c.HysteresisPa, limit, uh)
			pr.HysteresisDecision = Worse(pr.HysteresisDecision, c.Decision)
		}
		pr.Decision = Worse(pr.Decision, pr.HysteresisDecision)
	}

	// The 4 : 1 practice compares the reference standard alone, restated
	// at the analysis coverage, with the permissible error.
	if uStd := opt.CoverageFactor * ref.Expanded(pr.ReferenceMeanPa) / ref.K; uStd > 0 {
		t := pr.MPEPa / uStd
		pr.ReferenceRatio = &t
	}
	if pr.ExpandedUncertaintyPa > 0 {
		t := pr.MPEPa / pr.ExpandedUncertaintyPa
		pr.ExpandedRatio = &t
	}
}

func rect(name string, estimate, divisor float64) Contribution {
	return Contribution{Name: name, Evaluated: true, EstimatePa: estimate, Distribution: "rectangular", Divisor: divisor, StandardUncertaintyPa: estimate / divisor}
}

func notEvaluated(name, why string) Contribution {
	return Contribution{Name: name, Note: why}
}

func dof(n float64) *float64 { return &n }

// budget lists every contribution at a point, evaluated or not.
func budget(pr PointResult, rs []reading, dev Device, ref Reference, opt Options, res Result) []Contribution {
	uRef := ref.Expanded(pr.ReferenceMeanPa)
	b := []Contribution{
		{Name: "reference", Evaluated: true, EstimatePa: uRef, Distribution: "normal", Divisor: ref.K, StandardUncertaintyPa: uRef / ref.K},
		rect("resolution", dev.ResolutionPa, sqrt12),
	}
	if res.Zero.Evaluated {
		b = append(b, rect("zero_deviation", res.Zero.DeviationPa, sqrt12))
	} else {
		b = append(b, notEvaluated("zero_deviation", "no cycle has a zero reading before and after"))
	}
	if pr.RepeatabilityEvaluated {
		c := rect("repeatability", pr.RepeatabilityPa, sqrt12)
		n := repeatSeries(pr)
		if len(pr.RepeatabilityFrom) > 0 {
			c.Note = "from " + pointsWord(pr.RepeatabilityFrom)
			n = 0
			for _, q := range res.Points {
				if q.RepeatabilityEvaluated && len(q.RepeatabilityFrom) == 0 && q.RepeatabilityPa == pr.RepeatabilityPa {
					n = repeatSeries(q)
					break
				}
			}
		}
		if opt.Coverage == CoverageStudentT && n >= 2 {
			c.DegreesOfFreedom = dof(float64(n - 1))
		}
		b = append(b, c)
	} else {
		b = append(b, notEvaluated("repeatability", "no repeated series in either direction"))
	}
	if pr.HysteresisEvaluated {
		b = append(b, rect("hysteresis", pr.HysteresisPa, sqrt12))
	} else {
		b = append(b, notEvaluated("hysteresis", "no cycle has both an up and a down reading here"))
	}
	if ref.Head.enabled() {
		hh, hd := ref.Head.halfWidths(pr.ReferenceMeanPa - meanHead(rs))
		b = append(b, rect("head_height", hh, math.Sqrt(3)), rect("head_density", hd, math.Sqrt(3)))
	} else {
		b = append(b, notEvaluated("head_height", "no head correction configured"), notEvaluated("head_density", "no head correction configured"))
	}
	if ref.StabilityPercentOfReading > 0 || ref.StabilityFloorPa > 0 {
		b = append(b, rect("reference_stability", ref.stability(pr.ReferenceMeanPa), math.Sqrt(3)))
	} else {
		b = append(b, notEvaluated("reference_stability", "no stability since calibration configured"))
	}
	if ref.ResolutionPa > 0 {
		b = append(b, rect("reference_resolution", ref.ResolutionPa, sqrt12))
	} else {
		b = append(b, notEvaluated("reference_resolution", "no reference resolution configured"))
	}
	b = append(b, windowNoise(rs))
	b = append(b, temperatureTerm(dev, opt, rs))
	if ref.Barometer != nil {
		b = append(b, barometerTerm(ref))
	}
	switch {
	case !opt.InterpolationInBudget:
		b = append(b, notEvaluated("interpolation", "the correction curve is not used between the points"))
	case res.Correction == nil || !res.Correction.InterpolationEvaluated:
		b = append(b, notEvaluated("interpolation", "the correction curve has no residual degrees of freedom"))
	default:
		b = append(b, rect("interpolation", res.Correction.MaxResidualPa, math.Sqrt(3)))
	}
	return b
}

func meanHead(rs []reading) float64 {
	s := 0.0
	for _, r := range rs {
		s += r.head
	}
	return s / float64(len(rs))
}

// windowNoise is the scatter of the reference over its settled windows:
// the standard deviation of the window mean, s/√n, of the noisiest reading
// at the point, a Type A term with ν = n − 1.
func windowNoise(rs []reading) Contribution {
	var worst reading
	u := -1.0
	for _, r := range rs {
		if r.refN >= 2 {
			if v := r.refSD / math.Sqrt(float64(r.refN)); v > u {
				u, worst = v, r
			}
		}
	}
	if u < 0 {
		return notEvaluated("reference_noise", "no settled window of two or more reference samples")
	}
	n := math.Sqrt(float64(worst.refN))
	return Contribution{Name: "reference_noise", Evaluated: true, EstimatePa: worst.refSD, Distribution: "normal", Divisor: n,
		StandardUncertaintyPa: u, DegreesOfFreedom: dof(float64(worst.refN - 1))}
}

// temperatureTerm is the device's temperature effect: coefficient (% of
// span per K) × span × |ambient − reference temperature|, rectangular.
// The ambient temperature is the one measured over the readings' windows
// (the largest deviation among the point's readings), else the one given
// for the whole run.
func temperatureTerm(dev Device, opt Options, rs []reading) Contribution {
	dev2, measured := 0.0, false
	for _, r := range rs {
		if r.hasAmbientC {
			dev2, measured = math.Max(dev2, math.Abs(r.ambientC-dev.ReferenceTemperatureC)), true
		}
	}
	switch {
	case dev.TempCoefficient == 0:
		return notEvaluated("temperature", "no temperature coefficient configured")
	case measured:
		c := rect("temperature", dev.TempCoefficient/100*dev.Span()*dev2, math.Sqrt(3))
		c.Note = fmt.Sprintf("measured: %.2f K from the reference temperature %g °C", dev2, dev.ReferenceTemperatureC)
		return c
	case opt.AmbientC == nil:
		return notEvaluated("temperature", "no ambient temperature recorded")
	}
	a := dev.TempCoefficient / 100 * dev.Span() * math.Abs(*opt.AmbientC-dev.ReferenceTemperatureC)
	return rect("temperature", a, math.Sqrt(3))
}

func summarise(rs []reading) *SeriesSummary {
	if len(rs) == 0 {
		return nil
	}
	refs, duts, errs := make([]float64, len(rs)), make([]float64, len(rs)), make([]float64, len(rs))
	for i, r := range rs {
		refs[i], duts[i], errs[i] = r.ref, r.dut, r.err()
	}
	lo, hi := extremes(errs)
	return &SeriesSummary{
		Series:          len(rs),
		ReferenceMeanPa: mean(refs),
		DUTMeanPa:       mean(duts),
		MeanErrorPa:     mean(errs),
		ErrorStdDevPa:   sampleSD(errs),
		ErrorRangePa:    errs[hi] - errs[lo],
	}
}

// pointWarnings explain a point's verdict and what limits it, in the
// display unit and with the table's point numbers.
func pointWarnings(pr PointResult, dev Device, opt Options, say messages) []string {
	var w []string
	at := fmt.Sprintf("point %d (%s)", pr.Index+1, say.nominal(pr.NominalPa))
	for _, c := range pr.HysteresisCycles {
		if c.Decision != "" && c.Decision != Pass {
			w = append(w, fmt.Sprintf("%s: the cycle %d hysteresis %s against the limit %s: the point %s", at, c.Cycle, say.p(c.HysteresisPa), say.p(*pr.HysteresisLimitPa), verb(c.Decision)))
		}
	}
	for _, d := range []*DirectionResult{pr.UpResult, pr.DownResult} {
		if d == nil || d.Decision == Pass {
			continue
		}
		dir := Ascending
		if d == pr.DownResult {
			dir = Descending
		}
		w = append(w, fmt.Sprintf("%s: the %s readings %s (cycle %d error %s, MPE %s, U of one reading %s); the mean error is %s",
			at, dirWord(dir), verb(d.Decision), d.WorstCycle, say.signed(d.WorstErrorPa), say.p(pr.MPEPa), say.p(d.ExpandedUncertaintyPa), say.signed(pr.MeanErrorPa)))
	}
	if opt.Rule != RuleSimple && pr.ExpandedUncertaintyPa >= pr.MPEPa {
		w = append(w, fmt.Sprintf("%s: expanded uncertainty %s is not below the MPE %s, so no pass is possible under the %s rule", at, say.p(pr.ExpandedUncertaintyPa), say.p(pr.MPEPa), opt.Rule))
	}
	span := dev.Span()
	if pr.ReferenceMeanPa < dev.LowerPa-0.01*span || pr.ReferenceMeanPa > dev.UpperPa+0.01*span {
		w = append(w, fmt.Sprintf("%s: reference %s lies outside the device range %s … %s", at, say.p(pr.ReferenceMeanPa), say.p(dev.LowerPa), say.p(dev.UpperPa)))
	}
	return w
}

func dirWord(d Direction) string {
	if d == Ascending {
		return "ascending"
	}
	return "descending"
}

// verb says an outcome as a verb phrase.
func verb(o Outcome) string {
	switch o {
	case Pass:
		return "pass"
	case ConditionalPass:
		return "pass only conditionally"
	case ConditionalFail:
		return "fail conditionally"
	}
	return "fail"
}

// messages formats pressures for warnings and errors in the display unit,
// in fixed notation with the digits of a mean at the device's resolution:
// people read them.
type messages struct {
	u   units.Unit
	res float64 // the device's resolution, Pa
}

func (m messages) p(pa float64) string { return readout.MeanWithUnit(pa, m.u, m.res) }

// nominal is a set point: the resolution's own digits, no extra one.
func (m messages) nominal(pa float64) string { return readout.WithUnit(pa, m.u, m.res) }

func (m messages) signed(pa float64) string {
	s := m.p(pa)
	if pa > 0 {
		return "+" + s
	}
	return s
}

func plural(n int, what string) string {
	if n == 1 {
		return "1 " + what
	}
	return strconv.Itoa(n) + " " + what + "s"
}

// pointsWord is "point 3" or "points 1 and 4".
func pointsWord(ns []int) string {
	if len(ns) == 1 {
		return "point " + numberList(ns)
	}
	return "points " + numberList(ns)
}

// numberList writes point numbers as "1, 4 and 6".
func numberList(ns []int) string {
	s := ""
	for i, n := range ns {
		switch {
		case i == 0:
		case i == len(ns)-1:
			s += " and "
		default:
			s += ", "
		}
		s += strconv.Itoa(n)
	}
	return s
}

func linearities(x, y []float64, span float64, kinds []LinearityKind) ([]Linearity, error) {
	out := make([]Linearity, 0, len(kinds))
	for _, k := range kinds {
		var l Line
		var err error
		switch k {
		case LinearityTerminal:
			l, err = TerminalLine(x, y)
		case LinearityZeroBased:
			l, err = ZeroBasedLine(x, y)
		case LinearityLeastSquares:
			var f LeastSquares
			f, err = FitLeastSquares(x, y)
			l = f.Line
		case LinearityIndependent:
			l, err = IndependentLine(x, y)
		}
		if err != nil {
			return nil, err
		}
		lin := Linearity{Kind: k, Line: l, DeviationsPa: make([]float64, len(x))}
		for i := range x {
			d := y[i] - l.At(x[i])
			lin.DeviationsPa[i] = d
			lin.MaxDeviationPa = math.Max(lin.MaxDeviationPa, math.Abs(d))
		}
		lin.MaxDeviationPercentSpan = lin.MaxDeviationPa / span * 100
		out = append(out, lin)
	}
	return out, nil
}

func correctionCurve(indication, reference []float64, degree int) (*CorrectionCurve, error) {
	p, err := FitPolynomial(indication, reference, degree)
	if err != nil {
		return nil, err
	}
	c := &CorrectionCurve{Polynomial: p, ResidualsPa: make([]float64, len(indication))}
	var sse float64
	for i := range indication {
		r := reference[i] - p.At(indication[i])
		c.ResidualsPa[i] = r
		c.MaxResidualPa = math.Max(c.MaxResidualPa, math.Abs(r))
		sse += r * r
	}
	c.PowerCoefficients = p.PowerSeries()
	if free := len(indication) - degree - 1; free > 0 {
		c.ResidualSDPa = math.Sqrt(sse / float64(free))
		c.CoefficientSD, c.Correlation = p.coefficientCovariance(indication, c.ResidualSDPa)
		c.InterpolationPa = c.MaxResidualPa / math.Sqrt(3)
		c.InterpolationEvaluated = true
	}
	return c, nil
}
