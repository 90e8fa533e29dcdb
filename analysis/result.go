package analysis

import "time"

// SchemaVersion is the version of the Result JSON layout. It changes only
// when a key is renamed or removed or changes meaning; added keys keep it.
const SchemaVersion = 1

// Result is the full evaluation of one calibration run. All pressures are in
// pascal; the JSON keys carry their unit (`_pa`, `_percent_span`, `_pa_per_hour`).
type Result struct {
	SchemaVersion  int          `json:"schema_version"`
	DecisionRule   DecisionRule `json:"decision_rule"`
	CoverageFactor float64      `json:"coverage_factor"`
	Device         Device       `json:"device"`
	Reference      Reference    `json:"reference"`
	// HeadCorrectionPa was added to every reference reading before anything else.
	HeadCorrectionPa float64 `json:"head_correction_pa"`
	Cycles           int     `json:"cycles"` // distinct cycle numbers among the measurement points

	Points     []PointResult    `json:"points"` // by Index
	Zero       ZeroDeviation    `json:"zero"`
	Linearity  []Linearity      `json:"linearity"`
	Correction *CorrectionCurve `json:"correction_curve,omitempty"`
	Drift      *Drift           `json:"drift,omitempty"` // only with two or more cycles

	MaxAbsErrorPa           float64  `json:"max_abs_error_pa"`
	MaxErrorSpanPa          float64  `json:"max_error_span_pa"`
	MaxErrorSpanPercentSpan float64  `json:"max_error_span_percent_span"`
	MaxHysteresisPa         float64  `json:"max_hysteresis_pa"`
	MaxRepeatabilityPa      float64  `json:"max_repeatability_pa"`
	MinTUR                  *float64 `json:"min_tur,omitempty"` // absent when no point has a defined TUR
	Decision                Outcome  `json:"decision"`          // the worst point's outcome
	Warnings                []string `json:"warnings"`
}

// PointResult is everything computed at one nominal point (one Index).
type PointResult struct {
	Index     int             `json:"index"`
	NominalPa float64         `json:"nominal_pa"`
	Readings  []SeriesReading `json:"readings"` // by cycle, up before down
	Up        *SeriesSummary  `json:"up,omitempty"`
	Down      *SeriesSummary  `json:"down,omitempty"`

	ReferenceMeanPa  float64 `json:"reference_mean_pa"` // head-corrected
	DUTMeanPa        float64 `json:"dut_mean_pa"`
	MeanErrorPa      float64 `json:"mean_error_pa"` // Δ = mean of (DUT − reference) over the readings
	CorrectionPa     float64 `json:"correction_pa"` // −Δ
	ErrorPercentSpan float64 `json:"error_percent_span"`
	ErrorStdDevPa    float64 `json:"error_stddev_pa"` // sample (n − 1) SD of the errors; 0 for one reading
	HysteresisPa     float64 `json:"hysteresis_pa"`
	RepeatabilityPa  float64 `json:"repeatability_pa"`

	Budget                []Contribution `json:"budget"`
	CombinedUncertaintyPa float64        `json:"combined_standard_uncertainty_pa"`
	ExpandedUncertaintyPa float64        `json:"expanded_uncertainty_pa"`
	ErrorSpanPa           float64        `json:"error_span_pa"` // |Δ| + U
	MPEPa                 float64        `json:"mpe_pa"`
	AcceptanceLimitPa     float64        `json:"acceptance_limit_pa"` // largest |Δ| that passes under the rule
	TUR                   *float64       `json:"tur,omitempty"`       // absent when the reference uncertainty is 0 here
	Decision              Outcome        `json:"decision"`
}

// SeriesReading is one captured pair: one series' reading at one point.
type SeriesReading struct {
	Cycle       int       `json:"cycle"`
	Direction   Direction `json:"direction"`
	ReferencePa float64   `json:"reference_pa"` // head-corrected
	DUTPa       float64   `json:"dut_pa"`
	ErrorPa     float64   `json:"error_pa"` // DUT − reference of this same reading
	Time        time.Time `json:"time,omitzero"`
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

// Contribution is one line of an uncertainty budget.
type Contribution struct {
	Name                  string  `json:"name"` // reference, resolution, zero_deviation, repeatability, hysteresis, head_height, head_density
	EstimatePa            float64 `json:"estimate_pa"`
	Distribution          string  `json:"distribution"` // normal or rectangular
	Divisor               float64 `json:"divisor"`
	StandardUncertaintyPa float64 `json:"standard_uncertainty_pa"`
}

// ZeroDeviation is f₀: the largest change of the zero error within a cycle.
type ZeroDeviation struct {
	// Source says which readings were used: "zero-readings" (points of kind
	// zero-before/zero-after), "nominal-zero-points" (no zero readings: the
	// up and down measurement at nominal 0 Pa of each cycle), or "none".
	Source      string      `json:"source"`
	Cycles      []ZeroCycle `json:"cycles"`
	DeviationPa float64     `json:"deviation_pa"`
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
