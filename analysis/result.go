package analysis

import "time"

// SchemaVersion is the version of the Result JSON layout. It changes only
// when a key is renamed or removed or changes meaning; added keys keep it.
//
// Version 2: the point decision judges each direction and the per-cycle
// hysteresis limit instead of the mean error; mean_error_pa is the midpoint
// of the two direction means; "tur" became mpe_to_reference_uncertainty and
// mpe_to_expanded_uncertainty was added; coverage_factor is per point.
const SchemaVersion = 2

// Result is the full evaluation of one calibration run. All pressures are in
// pascal; the JSON keys carry their unit (`_pa`, `_percent_span`, `_pa_per_hour`).
type Result struct {
	SchemaVersion int          `json:"schema_version"`
	DecisionRule  DecisionRule `json:"decision_rule"`
	// TieRule says which side a value exactly on a limit belongs to.
	TieRule string `json:"tie_rule"`
	// CoverageFactor is the largest k over the points (all points share it
	// under the conventional method).
	CoverageFactor float64   `json:"coverage_factor"`
	Coverage       Coverage  `json:"coverage"`
	Device         Device    `json:"device"`
	Reference      Reference `json:"reference"`
	// HeadCorrectionPa was added to every reference reading before anything
	// else; with a gas medium it varies with pressure and is given per reading.
	HeadCorrectionPa float64 `json:"head_correction_pa"`
	HeadVaries       bool    `json:"head_correction_varies,omitempty"`
	Cycles           int     `json:"cycles"` // distinct cycle numbers among the measurement points
	// ShortProcedure is set when some point has no repeated series: the
	// repeatability found elsewhere is applied there and U is never below
	// the basic-procedure minimum (MinimumUncertaintyPa).
	ShortProcedure       bool    `json:"short_procedure"`
	MinimumUncertaintyPa float64 `json:"minimum_expanded_uncertainty_pa,omitempty"`

	Points     []PointResult    `json:"points"` // by Index
	Zero       ZeroDeviation    `json:"zero"`
	Linearity  []Linearity      `json:"linearity"`
	Correction *CorrectionCurve `json:"correction_curve,omitempty"`
	Drift      *Drift           `json:"drift,omitempty"` // only with two or more cycles

	MaxAbsErrorPa           float64 `json:"max_abs_error_pa"`
	MaxErrorSpanPa          float64 `json:"max_error_span_pa"`
	MaxErrorSpanPercentSpan float64 `json:"max_error_span_percent_span"`
	MaxHysteresisPa         float64 `json:"max_hysteresis_pa"`
	MaxRepeatabilityPa      float64 `json:"max_repeatability_pa"`
	// The smallest ratios over the points; absent when no point defines one.
	MinReferenceRatio *float64 `json:"min_mpe_to_reference_uncertainty,omitempty"`
	MinExpandedRatio  *float64 `json:"min_mpe_to_expanded_uncertainty,omitempty"`
	Decision          Outcome  `json:"decision"` // the worst point's outcome
	Warnings          []string `json:"warnings"`
	// Output is a transmitter's calibration in mA (output.go); nil for other devices.
	Output *OutputResult `json:"output,omitempty"`
	// Ambient is the ambient conditions per point and over the run
	// (ambient.go); nil when no ambient instrument was read.
	Ambient *AmbientResult `json:"ambient,omitempty"`
}

// Coverage states how the expanded uncertainty was obtained.
type Coverage struct {
	Method CoverageMethod `json:"method"`
	// Probability is the coverage probability the factor is meant for, %.
	Probability float64 `json:"probability_percent"`
	Statement   string  `json:"statement"` // the sentence printed on the report
}

// DirectionResult judges one direction (all ascending or all descending
// readings) at a point against the permissible error: every reading of
// the direction must meet it.
type DirectionResult struct {
	// ExpandedUncertaintyPa is the U used for a single reading of this
	// direction: the point's budget without its hysteresis term (a reading
	// of one direction is not a mean of up and down), at the same coverage.
	ExpandedUncertaintyPa float64 `json:"expanded_uncertainty_pa"`
	WorstErrorPa          float64 `json:"worst_error_pa"` // the reading error of largest magnitude
	WorstCycle            int     `json:"worst_cycle"`
	Decision              Outcome `json:"decision"`
}

// HysteresisCycle is the hysteresis of one cycle at a point, judged
// against the hysteresis limit when the specification has one.
type HysteresisCycle struct {
	Cycle        int     `json:"cycle"`
	HysteresisPa float64 `json:"hysteresis_pa"` // |e_down − e_up|
	Decision     Outcome `json:"decision,omitempty"`
}

// PointResult is everything computed at one nominal point (one Index).
type PointResult struct {
	Index     int             `json:"index"`
	NominalPa float64         `json:"nominal_pa"`
	Readings  []SeriesReading `json:"readings"` // by cycle, up before down
	Up        *SeriesSummary  `json:"up,omitempty"`
	Down      *SeriesSummary  `json:"down,omitempty"`

	// Means: with both directions, the midpoint of the ascending and the
	// descending mean (so unequal numbers of series do not tilt it towards
	// one direction, as the hysteresis term assumes); else the one direction's.
	ReferenceMeanPa  float64 `json:"reference_mean_pa"` // head-corrected
	DUTMeanPa        float64 `json:"dut_mean_pa"`
	MeanErrorPa      float64 `json:"mean_error_pa"` // Δ = DUT mean − reference mean, as above
	CorrectionPa     float64 `json:"correction_pa"` // −Δ
	ErrorPercentSpan float64 `json:"error_percent_span"`
	ErrorStdDevPa    float64 `json:"error_stddev_pa"` // sample (n − 1) SD of the errors; 0 for one reading
	// Hysteresis: mean over the cycles with both directions; per cycle below.
	HysteresisPa        float64           `json:"hysteresis_pa"`
	HysteresisEvaluated bool              `json:"hysteresis_evaluated"`
	HysteresisCycles    []HysteresisCycle `json:"hysteresis_cycles"`
	HysteresisLimitPa   *float64          `json:"hysteresis_limit_pa,omitempty"` // absent when the specification sets none
	// Repeatability: at this point, or borrowed (the largest found at the
	// points named in RepeatabilityFrom, numbered as in the table).
	RepeatabilityPa        float64 `json:"repeatability_pa"`
	RepeatabilityEvaluated bool    `json:"repeatability_evaluated"`
	RepeatabilityFrom      []int   `json:"repeatability_from_points,omitempty"`

	Budget                []Contribution `json:"budget"`
	CombinedUncertaintyPa float64        `json:"combined_standard_uncertainty_pa"`
	// EffectiveDOF is ν_eff (Welch–Satterthwaite); absent when infinite or
	// not computed (conventional coverage).
	EffectiveDOF          *float64 `json:"effective_degrees_of_freedom,omitempty"`
	CoverageFactor        float64  `json:"coverage_factor"`
	ExpandedUncertaintyPa float64  `json:"expanded_uncertainty_pa"`
	// MinimumApplied: k·u_c was below the short procedure's minimum and U was raised to it.
	MinimumApplied    bool    `json:"minimum_uncertainty_applied,omitempty"`
	ErrorSpanPa       float64 `json:"error_span_pa"` // |Δ| + U
	MPEPa             float64 `json:"mpe_pa"`
	AcceptanceLimitPa float64 `json:"acceptance_limit_pa"` // largest |Δ| of a mean that passes under the rule
	// ReferenceRatio = MPE / U of the reference standard alone (at the
	// analysis coverage factor): the 4 : 1 practice. ExpandedRatio = MPE / U
	// of the whole measurement at this point. Absent when the divisor is 0.
	ReferenceRatio *float64         `json:"mpe_to_reference_uncertainty,omitempty"`
	ExpandedRatio  *float64         `json:"mpe_to_expanded_uncertainty,omitempty"`
	UpResult       *DirectionResult `json:"up_decision,omitempty"`
	DownResult     *DirectionResult `json:"down_decision,omitempty"`
	// HysteresisDecision is the worst cycle's hysteresis outcome; empty when no limit applies.
	HysteresisDecision Outcome `json:"hysteresis_decision,omitempty"`
	// Decision is the worst of the two directions and the hysteresis.
	Decision Outcome `json:"decision"`
}

// SeriesReading is one captured pair: one series' reading at one point.
type SeriesReading struct {
	Cycle       int       `json:"cycle"`
	Direction   Direction `json:"direction"`
	ReferencePa float64   `json:"reference_pa"` // head-corrected
	DUTPa       float64   `json:"dut_pa"`
	ErrorPa     float64   `json:"error_pa"` // DUT − reference of this same reading
	// HeadCorrectionPa is the part of ReferencePa that the head correction added.
	HeadCorrectionPa float64   `json:"head_correction_pa"`
	Time             time.Time `json:"time,omitzero"`
}

// SeriesSummary pools the series of one direction at one point.
type SeriesSummary struct {
	Series          int     `json:"series"`
	ReferenceMeanPa float64 `json:"reference_mean_pa"`
	DUTMeanPa       float64 `json:"dut_mean_pa"`
	MeanErrorPa     float64 `json:"mean_error_pa"`
	ErrorStdDevPa   float64 `json:"error_stddev_pa"` // sample (n − 1); 0 for one series
	ErrorRangePa    float64 `json:"error_range_pa"`  // max − min of the errors
}

// Contribution is one line of an uncertainty budget. A line that could not
// be evaluated (not configured, or no data for it) stays in the budget with
// Evaluated false and a Note saying why; it adds nothing to u_c.
type Contribution struct {
	// Name: reference, reference_stability, reference_resolution,
	// reference_noise, resolution, zero_deviation, repeatability, hysteresis,
	// temperature, head_height, head_density, interpolation.
	Name                  string  `json:"name"`
	Evaluated             bool    `json:"evaluated"`
	Note                  string  `json:"note,omitempty"`
	EstimatePa            float64 `json:"estimate_pa"`
	Distribution          string  `json:"distribution"` // normal or rectangular
	Divisor               float64 `json:"divisor"`
	StandardUncertaintyPa float64 `json:"standard_uncertainty_pa"`
	// DegreesOfFreedom ν of a Type A term; absent means infinite (Type B).
	DegreesOfFreedom *float64 `json:"degrees_of_freedom,omitempty"`
}

// ZeroDeviation is f₀: the largest change of the zero error within a cycle.
type ZeroDeviation struct {
	// Source says which readings were used: "zero-readings" (points of kind
	// zero-before/zero-after), "nominal-zero-points" (no zero readings: the
	// up and down measurement at nominal 0 Pa of each cycle), or "none".
	Source      string      `json:"source"`
	Cycles      []ZeroCycle `json:"cycles"`
	DeviationPa float64     `json:"deviation_pa"`
	Evaluated   bool        `json:"evaluated"` // false when Source is "none"
}

// ZeroCycle holds one cycle's zero errors (DUT − reference).
type ZeroCycle struct {
	Cycle         int      `json:"cycle"`
	BeforeErrorPa *float64 `json:"before_error_pa,omitempty"`
	AfterErrorPa  *float64 `json:"after_error_pa,omitempty"`
	ChangePa      *float64 `json:"change_pa,omitempty"` // after − before, when both exist
}

// Linearity is one form of linearity of the calibration curve (mean DUT
// indication against mean reference).
type Linearity struct {
	Kind LinearityKind `json:"kind"`
	Line
	MaxDeviationPa          float64   `json:"max_deviation_pa"` // largest |deviation|
	MaxDeviationPercentSpan float64   `json:"max_deviation_percent_span"`
	DeviationsPa            []float64 `json:"deviations_pa"` // per point, in Points order: mean indication − line(reference)
}

// CorrectionCurve maps a DUT indication to the reference pressure, fitted
// on the point means.
type CorrectionCurve struct {
	Polynomial
	ResidualsPa   []float64 `json:"residuals_pa"` // per point: reference mean − curve(DUT mean)
	MaxResidualPa float64   `json:"max_residual_pa"`
	ResidualSDPa  float64   `json:"residual_sd_pa"` // sqrt(Σr²/(n − degree − 1)); 0 when the fit is exact by construction
	// Power-series form p = Σ a_j·x^j (x the indication, both in Pa; a_j in
	// Pa^(1−j)), with the standard uncertainties of the a_j from the residual
	// scatter and their correlation matrix. Absent when the fit has no
	// residual degrees of freedom.
	PowerCoefficients []float64   `json:"power_coefficients"`
	CoefficientSD     []float64   `json:"power_coefficient_sd,omitempty"`
	Correlation       [][]float64 `json:"power_coefficient_correlation,omitempty"`
	// InterpolationPa is the standard uncertainty of using the curve between
	// the points: the largest |residual| as the half-width of a rectangular
	// distribution. InterpolationEvaluated is false when the curve passes
	// through every point by construction (nothing to judge it by).
	InterpolationPa        float64 `json:"interpolation_standard_uncertainty_pa"`
	InterpolationEvaluated bool    `json:"interpolation_evaluated"`
}

// Correct returns the reference pressure that corresponds to a later DUT
// indication. It evaluates the curve anywhere; use Covers to refuse
// extrapolation outside the calibrated indications.
func (c CorrectionCurve) Correct(indicationPa float64) float64 { return c.At(indicationPa) }

// Covers says whether an indication lies inside the fitted range.
func (c CorrectionCurve) Covers(indicationPa float64) bool {
	return indicationPa >= c.XMinPa && indicationPa <= c.XMaxPa
}

// Drift summarises how the error moved over the cycles of a run.
type Drift struct {
	Points               []PointDrift `json:"points"`
	ZeroTrend            *Trend       `json:"zero_trend,omitempty"`
	LargestCycleChangePa float64      `json:"largest_cycle_change_pa"`
}

// PointDrift is the cycle-by-cycle behaviour at one point. A cycle's error is
// the mean of that cycle's readings at the point (up and down).
type PointDrift struct {
	Index                int          `json:"index"`
	NominalPa            float64      `json:"nominal_pa"`
	CycleErrors          []CycleError `json:"cycle_errors"`
	StdDevPa             float64      `json:"stddev_over_cycles_pa"` // sample (n − 1)
	LargestCycleChangePa float64      `json:"largest_cycle_change_pa"`
	Trend                *Trend       `json:"trend,omitempty"`
}

// CycleError is one cycle's mean error at a point.
type CycleError struct {
	Cycle   int       `json:"cycle"`
	ErrorPa float64   `json:"error_pa"`
	Time    time.Time `json:"time,omitzero"`
}

// Trend is a least-squares straight line of an error against time.
type Trend struct {
	SlopePaPerHour             float64 `json:"slope_pa_per_hour"`
	SlopeStdUncertaintyPerHour float64 `json:"slope_standard_uncertainty_pa_per_hour"`
	N                          int     `json:"n"`
}
