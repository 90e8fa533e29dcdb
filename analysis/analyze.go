package analysis

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"time"
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
	// CoverageFactor k for the expanded uncertainty; 0 means 2.
	CoverageFactor float64 `json:"coverage_factor"`
	// Linearity lists the forms to compute; empty means all four.
	Linearity []LinearityKind `json:"linearity"`
	// CorrectionDegree is the degree (1–3) of the correction curve; 0 means 1.
	CorrectionDegree int `json:"correction_degree"`
	// TURThreshold below which a warning is raised; 0 means 4 (4:1).
	TURThreshold float64 `json:"tur_threshold"`
}

func (o Options) withDefaults() (Options, error) {
	if err := o.Rule.validate(); err != nil {
		return o, err
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
	if o.TURThreshold == 0 {
		o.TURThreshold = 4
	}
	if !finite(o.TURThreshold) || o.TURThreshold < 0 {
		return o, fmt.Errorf("TUR threshold %g: must be ≥ 0", o.TURThreshold)
	}
	return o, nil
}

// reading is one validated measurement with its head-corrected reference.
type reading struct {
	cycle int
	dir   Direction
	ref   float64
	dut   float64
	t     time.Time
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
	seen     map[seriesKey]int // → point number
}

func describe(i int, p Point) string {
	return fmt.Sprintf("point %d (cycle %d, %s %s, index %d)", i+1, p.Cycle, p.Kind, p.Direction, p.Index)
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
	}
	if !finite(p.Nominal) || math.Abs(p.Nominal) > maxPressurePa {
		return fmt.Errorf("nominal %g Pa is not a finite pressure within ±%g Pa", p.Nominal, maxPressurePa)
	}
	return nil
}

// Analyze evaluates a calibration run. It never panics on bad input: every
// problem comes back as an error naming the offending point or setting.
//
// Definitions (pressures in Pa; e = DUT − head-corrected reference of the
// same reading, never against the nominal):
//   - mean error Δ = mean of e over all readings at the point; correction −Δ;
//   - hysteresis h = mean over the cycles that have both an up and a down
//     reading of |e_down − e_up| (errors, not indications, so that small
//     differences of the applied pressure between the two do not count);
//   - repeatability b = the larger over the two directions of the range
//     (max − min) of e over that direction's series;
//   - zero deviation f₀ = the largest |e_after − e_before| of a cycle,
//     applied at every point;
//   - budget: reference U_ref/k_ref (normal), resolution r, f₀, b and h each
//     rectangular with divisor 2√3, head correction half-widths with divisor
//     √3; u_c = √Σu², U = k·u_c, error span |Δ| + U;
//   - decision on |Δ| against the MPE at the reference mean (ILAC-G8).
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
	opt, err := opt.withDefaults()
	if err != nil {
		return Result{}, fmt.Errorf("options: %w", err)
	}
	if len(points) == 0 {
		return Result{}, errors.New("no points to analyse")
	}
	head := 0.0
	if ref.Head.enabled() {
		head = ref.Head.Pa()
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
		e := p.DUT.Mean - (p.Reference.Mean + head)
		if p.Kind != Measurement {
			key := seriesKey{p.Cycle, string(p.Kind)}
			if j, dup := zeroSeen[key]; dup {
				return Result{}, fmt.Errorf("%s: a second %s reading in cycle %d (first was point %d)", describe(i, p), p.Kind, p.Cycle, j+1)
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
			return Result{}, fmt.Errorf("%s: nominal %g Pa differs from %g Pa given earlier for index %d", describe(i, p), p.Nominal, g.nominal, p.Index)
		}
		key := seriesKey{p.Cycle, string(p.Direction)}
		if j, dup := g.seen[key]; dup {
			return Result{}, fmt.Errorf("%s: a second %s reading at index %d in cycle %d (first was point %d)", describe(i, p), p.Direction, p.Index, p.Cycle, j+1)
		}
		g.seen[key] = i
		g.readings = append(g.readings, reading{cycle: p.Cycle, dir: p.Direction, ref: p.Reference.Mean + head, dut: p.DUT.Mean, t: readingTime(p)})
	}
	if len(groups) == 0 {
		return Result{}, errors.New("no measurement points: only zero readings were given")
	}

	res := Result{
		SchemaVersion:    SchemaVersion,
		DecisionRule:     opt.Rule,
		CoverageFactor:   opt.CoverageFactor,
		Device:           dev,
		Reference:        ref,
		HeadCorrectionPa: head,
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
	if res.Zero.Source == "none" {
		warnings = append(warnings, "zero deviation not evaluated: no cycle has a zero reading both before and after; its budget term is 0")
	}

	span := dev.Span()
	var minTUR float64 = math.Inf(1)
	anyHyst, anyRepeat := false, false
	for n, idx := range indices {
		pr, hasHyst, hasRepeat := evaluatePoint(idx, groups[idx].nominal, readingsByPoint[n], dev, ref, opt, res.Zero.DeviationPa)
		anyHyst = anyHyst || hasHyst
		anyRepeat = anyRepeat || hasRepeat
		res.Points = append(res.Points, pr)
		res.Decision = Worse(res.Decision, pr.Decision)
		res.MaxAbsErrorPa = math.Max(res.MaxAbsErrorPa, math.Abs(pr.MeanErrorPa))
		res.MaxErrorSpanPa = math.Max(res.MaxErrorSpanPa, pr.ErrorSpanPa)
		res.MaxHysteresisPa = math.Max(res.MaxHysteresisPa, pr.HysteresisPa)
		res.MaxRepeatabilityPa = math.Max(res.MaxRepeatabilityPa, pr.RepeatabilityPa)
		if pr.TUR != nil {
			minTUR = math.Min(minTUR, *pr.TUR)
		}
		warnings = append(warnings, pointWarnings(pr, readingsByPoint[n], dev, opt)...)
	}
	res.MaxErrorSpanPercentSpan = res.MaxErrorSpanPa / span * 100
	if !math.IsInf(minTUR, 1) {
		res.MinTUR = &minTUR
		if minTUR < opt.TURThreshold {
			warnings = append(warnings, fmt.Sprintf("test uncertainty ratio %.2f:1 is below %g:1 (TUR = MPE / U of the reference standard)", minTUR, opt.TURThreshold))
		}
	}
	if !anyHyst {
		warnings = append(warnings, "hysteresis not evaluated: no cycle has both an up and a down reading at any point; its budget term is 0")
	}
	if !anyRepeat {
		warnings = append(warnings, "repeatability not evaluated: no point has two series in the same direction; its budget term is 0")
	}
	if c := dev.Accuracy.EN837Class; c != 0 {
		// At least 10 points for classes 0.1–0.6 and 5 for 1–4: a gauge
		// maker's EN 837 testing instructions (REFERENCES.md §2.1, [C-sec]).
		need := 5
		if c <= 0.6 {
			need = 10
		}
		if len(indices) < need {
			warnings = append(warnings, fmt.Sprintf("%d measuring points: EN 837-1 practice for class %g is at least %d", len(indices), c, need))
		}
	}

	xs, ys := make([]float64, len(res.Points)), make([]float64, len(res.Points))
	for i, p := range res.Points {
		xs[i], ys[i] = p.ReferenceMeanPa, p.DUTMeanPa
	}
	if lin, err := linearities(xs, ys, span, opt.Linearity); err != nil {
		warnings = append(warnings, "linearity not evaluated: "+err.Error())
	} else {
		res.Linearity = lin
	}
	if cc, err := correctionCurve(ys, xs, opt.CorrectionDegree); err != nil {
		warnings = append(warnings, "correction curve not fitted: "+err.Error())
	} else {
		res.Correction = cc
	}
	if res.Cycles >= 2 {
		res.Drift = drift(res.Points, zeros)
	}
	res.Warnings = append([]string{}, warnings...)
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
			z.Source = "zero-readings"
			if zeros[0].fallback {
				z.Source = "nominal-zero-points"
			}
		}
		z.Cycles = append(z.Cycles, zc)
	}
	return z
}

var sqrt12 = 2 * math.Sqrt(3)

func evaluatePoint(idx int, nominal float64, rs []reading, dev Device, ref Reference, opt Options, f0 float64) (pr PointResult, hasHyst, hasRepeat bool) {
	pr = PointResult{Index: idx, NominalPa: nominal, Readings: make([]SeriesReading, len(rs))}
	refs, duts, errs := make([]float64, 0, len(rs)), make([]float64, 0, len(rs)), make([]float64, 0, len(rs))
	byDir := map[Direction][]reading{}
	upErr := map[int]float64{}
	for i, r := range rs {
		e := r.err()
		pr.Readings[i] = SeriesReading{Cycle: r.cycle, Direction: r.dir, ReferencePa: r.ref, DUTPa: r.dut, ErrorPa: e, Time: r.t}
		refs, duts, errs = append(refs, r.ref), append(duts, r.dut), append(errs, e)
		byDir[r.dir] = append(byDir[r.dir], r)
		if r.dir == Ascending {
			upErr[r.cycle] = e
		}
	}
	pr.ReferenceMeanPa, pr.DUTMeanPa, pr.MeanErrorPa = mean(refs), mean(duts), mean(errs)
	pr.CorrectionPa = -pr.MeanErrorPa
	span := dev.Span()
	pr.ErrorPercentSpan = pr.MeanErrorPa / span * 100
	pr.ErrorStdDevPa = sampleSD(errs)

	var hsum float64
	var hn int
	for _, r := range byDir[Descending] {
		if eu, ok := upErr[r.cycle]; ok {
			hsum += math.Abs(r.err() - eu)
			hn++
		}
	}
	if hn > 0 {
		pr.HysteresisPa = hsum / float64(hn)
		hasHyst = true
	}
	pr.Up, pr.Down = summarise(byDir[Ascending]), summarise(byDir[Descending])
	for _, s := range []*SeriesSummary{pr.Up, pr.Down} {
		if s != nil {
			pr.RepeatabilityPa = math.Max(pr.RepeatabilityPa, s.ErrorRangePa)
			hasRepeat = hasRepeat || s.Series >= 2
		}
	}

	uRef := ref.Expanded(pr.ReferenceMeanPa)
	pr.Budget = []Contribution{
		{Name: "reference", EstimatePa: uRef, Distribution: "normal", Divisor: ref.K},
		rect("resolution", dev.ResolutionPa, sqrt12),
		rect("zero_deviation", f0, sqrt12),
		rect("repeatability", pr.RepeatabilityPa, sqrt12),
		rect("hysteresis", pr.HysteresisPa, sqrt12),
	}
	pr.Budget[0].StandardUncertaintyPa = uRef / ref.K
	if ref.Head.enabled() {
		hh, hd := ref.Head.halfWidths()
		pr.Budget = append(pr.Budget, rect("head_height", hh, math.Sqrt(3)), rect("head_density", hd, math.Sqrt(3)))
	}
	var v float64
	for _, c := range pr.Budget {
		v += c.StandardUncertaintyPa * c.StandardUncertaintyPa
	}
	pr.CombinedUncertaintyPa = math.Sqrt(v)
	pr.ExpandedUncertaintyPa = opt.CoverageFactor * pr.CombinedUncertaintyPa
	pr.ErrorSpanPa = math.Abs(pr.MeanErrorPa) + pr.ExpandedUncertaintyPa
	pr.MPEPa = dev.MPE(pr.ReferenceMeanPa)
	pr.AcceptanceLimitPa = AcceptanceLimit(opt.Rule, pr.MPEPa, pr.ExpandedUncertaintyPa)
	pr.Decision = Decide(opt.Rule, math.Abs(pr.MeanErrorPa), pr.MPEPa, pr.ExpandedUncertaintyPa)
	// TUR against the reference standard's own expanded uncertainty, restated
	// at the analysis coverage factor: the 4:1 practice compares the
	// standard, not the whole calibration process, with the tolerance.
	if uStd := opt.CoverageFactor * uRef / ref.K; uStd > 0 {
		t := pr.MPEPa / uStd
		pr.TUR = &t
	}
	return pr, hasHyst, hasRepeat
}

func rect(name string, estimate, divisor float64) Contribution {
	return Contribution{Name: name, EstimatePa: estimate, Distribution: "rectangular", Divisor: divisor, StandardUncertaintyPa: estimate / divisor}
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

func pointWarnings(pr PointResult, rs []reading, dev Device, opt Options) []string {
	var w []string
	at := fmt.Sprintf("point %d (nominal %g Pa)", pr.Index, pr.NominalPa)
	if pr.HysteresisPa > pr.MPEPa {
		// EN 837-1 limits hysteresis to |MPE| (from memory, REFERENCES.md §2.1 [M]).
		w = append(w, fmt.Sprintf("%s: hysteresis %.6g Pa exceeds the MPE %.6g Pa", at, pr.HysteresisPa, pr.MPEPa))
	}
	if math.Abs(pr.MeanErrorPa) <= pr.MPEPa {
		for _, r := range rs {
			if math.Abs(r.err()) > pr.MPEPa {
				w = append(w, fmt.Sprintf("%s: the cycle %d %s reading's error %.6g Pa exceeds the MPE although the mean error is within it", at, r.cycle, r.dir, r.err()))
			}
		}
	}
	if opt.Rule != RuleSimple && pr.ExpandedUncertaintyPa >= pr.MPEPa {
		w = append(w, fmt.Sprintf("%s: expanded uncertainty %.6g Pa is not below the MPE %.6g Pa, so no pass is possible under the %s rule", at, pr.ExpandedUncertaintyPa, pr.MPEPa, opt.Rule))
	}
	span := dev.Span()
	if pr.ReferenceMeanPa < dev.LowerPa-0.01*span || pr.ReferenceMeanPa > dev.UpperPa+0.01*span {
		w = append(w, fmt.Sprintf("%s: reference %.6g Pa lies outside the device range %g … %g Pa", at, pr.ReferenceMeanPa, dev.LowerPa, dev.UpperPa))
	}
	return w
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
	if dof := len(indication) - degree - 1; dof > 0 {
		c.ResidualSDPa = math.Sqrt(sse / float64(dof))
	}
	return c, nil
}
