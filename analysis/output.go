package analysis

import (
	"errors"
	"fmt"
	"math"
)

// A 4–20 mA transmitter is calibrated on its output: the applied pressure
// gives an ideal current, I_ideal = 4 mA + 16 mA × (p − LRV)/(URV − LRV),
// and the error is the measured current minus it, in mA and in % of the
// 16 mA span (REFERENCES.md §7, a definition of the scaling).
const (
	LoopZeroMA = 4.0  // output at the lower range value
	LoopSpanMA = 16.0 // output span from the lower to the upper range value
)

// NAMUR NE 43 signal levels (REFERENCES.md §7, [C-sec]): 3.8 … 20.5 mA
// carries a measurement, saturation just outside 4–20 mA included; at or
// below 3.6 mA and at or above 21.0 mA the transmitter signals a failure.
const (
	BandLowMA     = 3.8
	BandHighMA    = 20.5
	FailureLowMA  = 3.6
	FailureHighMA = 21.0
	// SaturationToleranceMA: a current this close to a band limit is taken
	// as held there by the transmitter's output limit, half a digit of a
	// meter that shows 0.01 mA (common practice; our choice of figure).
	SaturationToleranceMA = 0.005
)

// Signal says where a device's output current lies in the NE 43 levels:
// the empty Signal is an ordinary reading in the measuring band. A flagged
// reading of the device under test is kept and evaluated as found; only
// the reference and the safety guard treat such currents as faults.
type Signal string

const (
	SignalNone        Signal = ""
	SignalSaturated   Signal = "saturated"    // at a band limit: the output may be held there, so the error may be larger
	SignalUnderRange  Signal = "under-range"  // below 3.8 mA, above the failure level
	SignalOverRange   Signal = "over-range"   // above 20.5 mA, below the failure level
	SignalFailureLow  Signal = "failure-low"  // at or below 3.6 mA: the NE 43 failure signal (below 1 mA the driver calls the loop open)
	SignalFailureHigh Signal = "failure-high" // at or above 21.0 mA: the NE 43 failure signal
)

// ClassifyCurrent flags a loop current. NaN is flagged failure-low: it is
// no current at all.
func ClassifyCurrent(mA float64) Signal {
	switch {
	case !(mA > FailureLowMA):
		return SignalFailureLow
	case mA >= FailureHighMA:
		return SignalFailureHigh
	case mA < BandLowMA-SaturationToleranceMA:
		return SignalUnderRange
	case mA > BandHighMA+SaturationToleranceMA:
		return SignalOverRange
	case mA <= BandLowMA+SaturationToleranceMA || mA >= BandHighMA-SaturationToleranceMA:
		return SignalSaturated
	}
	return SignalNone
}

// severity orders flags so that a point shows the worst of its readings.
func (s Signal) severity() int {
	switch s {
	case SignalNone:
		return 0
	case SignalSaturated:
		return 1
	case SignalUnderRange, SignalOverRange:
		return 2
	}
	return 3
}

// Describe says what a flag means, for warnings and reports.
func (s Signal) Describe() string {
	switch s {
	case SignalSaturated:
		return fmt.Sprintf("at the NE 43 saturation limit (%g or %g mA): the output may be held there and the true error larger", BandLowMA, BandHighMA)
	case SignalUnderRange:
		return fmt.Sprintf("below the NE 43 measuring band (%g–%g mA)", BandLowMA, BandHighMA)
	case SignalOverRange:
		return fmt.Sprintf("above the NE 43 measuring band (%g–%g mA)", BandLowMA, BandHighMA)
	case SignalFailureLow:
		return fmt.Sprintf("at or below the NE 43 failure level %g mA (a failure signal or an open loop)", FailureLowMA)
	case SignalFailureHigh:
		return fmt.Sprintf("at or above the NE 43 failure level %g mA (a failure signal)", FailureHighMA)
	}
	return "in the measuring band"
}

// Loop is a transmitter's output: its loop range (the pressures of 4 and
// 20 mA) and the meter that reads the current.
type Loop struct {
	LowerPa float64   `json:"lower_pa"`
	UpperPa float64   `json:"upper_pa"`
	Meter   LoopMeter `json:"meter"`
}

// LoopMeter is the current meter's expanded uncertainty from its
// certificate, U = PercentOfReading % · |I| + FloorMA at coverage K, and its
// resolution. Zero values leave the term out as not evaluated.
type LoopMeter struct {
	PercentOfReading float64 `json:"percent_of_reading,omitempty"`
	FloorMA          float64 `json:"floor_ma,omitempty"`
	K                float64 `json:"k,omitempty"`
	ResolutionMA     float64 `json:"resolution_ma,omitempty"`
}

// MilliAmps is the ideal output current at pressure pa.
func (l Loop) MilliAmps(pa float64) float64 {
	return LoopZeroMA + LoopSpanMA*(pa-l.LowerPa)/(l.UpperPa-l.LowerPa)
}

// perPa is the output's slope, mA per Pa.
func (l Loop) perPa() float64 { return LoopSpanMA / (l.UpperPa - l.LowerPa) }

// loopRangeSlack is how far, relative to the span, a loop range end may sit
// from the device's and still be the same value written in another unit.
const loopRangeSlack = 1e-9

// Validate reports the first problem with the loop against the device.
func (l Loop) Validate(dev Device) error {
	span := l.UpperPa - l.LowerPa
	if !finite(l.LowerPa) || !finite(l.UpperPa) || !(span > 0) || !finite(span) {
		return fmt.Errorf("loop range %g … %g Pa: both ends must be finite and the upper above the lower", l.LowerPa, l.UpperPa)
	}
	slack := loopRangeSlack * math.Abs(dev.Span())
	if math.Abs(l.LowerPa-dev.LowerPa) > slack || math.Abs(l.UpperPa-dev.UpperPa) > slack {
		return fmt.Errorf("loop range %g … %g Pa differs from the device range %g … %g Pa: the ideal current would be computed on another span; re-range the transmitter or correct the configuration",
			l.LowerPa, l.UpperPa, dev.LowerPa, dev.UpperPa)
	}
	m := l.Meter
	for _, c := range []struct {
		name string
		v    float64
	}{{"uncertainty % of reading", m.PercentOfReading}, {"uncertainty floor", m.FloorMA}, {"resolution", m.ResolutionMA}, {"coverage factor", m.K}} {
		if !finite(c.v) || c.v < 0 {
			return fmt.Errorf("loop meter %s %g: must be a finite number ≥ 0", c.name, c.v)
		}
	}
	if (m.PercentOfReading > 0 || m.FloorMA > 0) && m.K == 0 {
		return errors.New("loop meter uncertainty without its coverage factor k (usually 2)")
	}
	return nil
}

// OutputResult is the calibration of a transmitter on its output: every
// value in mA, errors also in % of the 16 mA span. It restates the
// pressure-domain result of the same points; its budget adds the current
// meter, and its decision is the one a transmitter is judged by.
type OutputResult struct {
	Loop     Loop          `json:"loop"`
	Points   []OutputPoint `json:"points"`           // as Result.Points
	Flagged  int           `json:"flagged_readings"` // measurement and zero readings outside the measuring band or at its limits
	Decision Outcome       `json:"decision"`

	MaxAbsErrorMA          float64 `json:"max_abs_error_ma"`
	MaxAbsErrorPercentSpan float64 `json:"max_abs_error_percent_span"`
}

// OutputPoint is one calibration point on the output.
type OutputPoint struct {
	Index            int             `json:"index"`
	NominalPa        float64         `json:"nominal_pa"`
	AppliedPa        float64         `json:"applied_pa"` // the head-corrected reference mean
	IdealMA          float64         `json:"ideal_ma"`
	MeasuredMA       float64         `json:"measured_ma"`
	ErrorMA          float64         `json:"error_ma"`
	ErrorPercentSpan float64         `json:"error_percent_span"`
	Signal           Signal          `json:"signal,omitempty"` // the worst flag of its readings
	Readings         []OutputReading `json:"readings"`

	Budget                []OutputContribution `json:"budget"`
	CombinedUncertaintyMA float64              `json:"combined_standard_uncertainty_ma"`
	CoverageFactor        float64              `json:"coverage_factor"`
	ExpandedUncertaintyMA float64              `json:"expanded_uncertainty_ma"`
	MinimumApplied        bool                 `json:"minimum_uncertainty_applied,omitempty"` // U raised to the short procedure's minimum
	MPEMA                 float64              `json:"mpe_ma"`
	Decision              Outcome              `json:"decision"`
}

// OutputReading is one series' reading at a point, on the output.
type OutputReading struct {
	Cycle            int       `json:"cycle"`
	Direction        Direction `json:"direction"`
	AppliedPa        float64   `json:"applied_pa"`
	IdealMA          float64   `json:"ideal_ma"`
	MeasuredMA       float64   `json:"measured_ma"`
	ErrorMA          float64   `json:"error_ma"`
	ErrorPercentSpan float64   `json:"error_percent_span"`
	Signal           Signal    `json:"signal,omitempty"`
}

// OutputContribution is one line of the budget in mA.
type OutputContribution struct {
	Name                  string   `json:"name"`
	Evaluated             bool     `json:"evaluated"`
	Note                  string   `json:"note,omitempty"`
	EstimateMA            float64  `json:"estimate_ma"`
	Distribution          string   `json:"distribution,omitempty"`
	Divisor               float64  `json:"divisor,omitempty"`
	StandardUncertaintyMA float64  `json:"standard_uncertainty_ma"`
	DegreesOfFreedom      *float64 `json:"degrees_of_freedom,omitempty"`
}

// withOutput adds the output evaluation to a finished pressure-domain
// result when the device is a transmitter with a loop, and lets its
// decision count in the verdict.
func withOutput(res *Result, points []Point, dev Device, opt Options) error {
	if dev.Loop == nil {
		return nil
	}
	out, warnings, err := output(*res, points, *dev.Loop, opt)
	if err != nil {
		return err
	}
	res.Output = out
	res.Decision = Worse(res.Decision, out.Decision)
	res.Warnings = append(res.Warnings, warnings...)
	return nil
}

// output restates res on the loop's output. opt has its defaults. Each
// pressure term of the budget becomes mA through the output's slope
// (16 mA / span); the current meter adds its certificate term and its
// resolution, which stands in for the device's own: the indication of a
// transmitter is the current as the meter shows it.
func output(res Result, points []Point, loop Loop, opt Options) (*OutputResult, []string, error) {
	if err := loop.Validate(res.Device); err != nil {
		return nil, nil, err
	}
	f := loop.perPa()
	say := messages{opt.Unit, res.Device.ResolutionPa}
	type readingKey struct {
		index, cycle int
		dir          Direction
	}
	stored := map[readingKey]Signal{}
	for _, p := range points {
		if p.Kind == Measurement && p.Signal != SignalNone {
			stored[readingKey{p.Index, p.Cycle, p.Direction}] = p.Signal
		}
	}
	out := &OutputResult{Loop: loop, Decision: Pass, Points: make([]OutputPoint, len(res.Points))}
	var warnings []string
	for n, pr := range res.Points {
		op := OutputPoint{Index: pr.Index, NominalPa: pr.NominalPa, AppliedPa: pr.ReferenceMeanPa,
			IdealMA: loop.MilliAmps(pr.ReferenceMeanPa), MeasuredMA: loop.MilliAmps(pr.DUTMeanPa),
			ErrorMA: pr.MeanErrorPa * f, MPEMA: pr.MPEPa * f, Readings: make([]OutputReading, len(pr.Readings))}
		op.ErrorPercentSpan = op.ErrorMA / LoopSpanMA * 100
		for i, r := range pr.Readings {
			or := OutputReading{Cycle: r.Cycle, Direction: r.Direction, AppliedPa: r.ReferencePa,
				IdealMA: loop.MilliAmps(r.ReferencePa), MeasuredMA: loop.MilliAmps(r.DUTPa), ErrorMA: r.ErrorPa * f}
			or.ErrorPercentSpan = or.ErrorMA / LoopSpanMA * 100
			or.Signal = ClassifyCurrent(or.MeasuredMA)
			if s, ok := stored[readingKey{pr.Index, r.Cycle, r.Direction}]; ok && s.severity() > or.Signal.severity() {
				or.Signal = s // what the bench flagged stands, even if the mean says less
			}
			if or.Signal != SignalNone {
				out.Flagged++
				warnings = append(warnings, fmt.Sprintf("point %d (%s), cycle %d %s: the output read %.3f mA, %s; evaluated as found",
					pr.Index+1, say.nominal(pr.NominalPa), r.Cycle, dirWord(r.Direction), or.MeasuredMA, or.Signal.Describe()))
			}
			if or.Signal.severity() > op.Signal.severity() {
				op.Signal = or.Signal
			}
			op.Readings[i] = or
		}
		terms := outputBudget(pr.Budget, loop, op.MeasuredMA, f)
		op.CombinedUncertaintyMA = combined(terms, "")
		k, _ := coverageFor(opt, terms, "")
		op.CoverageFactor = k
		minimum := res.MinimumUncertaintyPa * f
		op.ExpandedUncertaintyMA = math.Max(k*op.CombinedUncertaintyMA, minimum)
		op.MinimumApplied = k*op.CombinedUncertaintyMA < minimum
		op.Decision = Decide(opt.Rule, math.Abs(op.ErrorMA), op.MPEMA, op.ExpandedUncertaintyMA)
		// One reading of one direction: the budget without hysteresis, as
		// in the pressure domain.
		kd, _ := coverageFor(opt, terms, "hysteresis")
		uDir := math.Max(kd*combined(terms, "hysteresis"), minimum)
		for _, r := range op.Readings {
			op.Decision = Worse(op.Decision, Decide(opt.Rule, math.Abs(r.ErrorMA), op.MPEMA, uDir))
		}
		if pr.HysteresisDecision != "" {
			op.Decision = Worse(op.Decision, pr.HysteresisDecision)
		}
		for _, c := range terms {
			op.Budget = append(op.Budget, OutputContribution{Name: c.Name, Evaluated: c.Evaluated, Note: c.Note, EstimateMA: c.EstimatePa,
				Distribution: c.Distribution, Divisor: c.Divisor, StandardUncertaintyMA: c.StandardUncertaintyPa, DegreesOfFreedom: c.DegreesOfFreedom})
		}
		out.Decision = Worse(out.Decision, op.Decision)
		out.MaxAbsErrorMA = math.Max(out.MaxAbsErrorMA, math.Abs(op.ErrorMA))
		out.Points[n] = op
	}
	out.MaxAbsErrorPercentSpan = out.MaxAbsErrorMA / LoopSpanMA * 100
	// Zero readings enter the zero deviation as found; a flagged one says so.
	for _, p := range points {
		if p.Kind == Measurement {
			continue
		}
		mA := loop.MilliAmps(p.DUT.Mean)
		sig := ClassifyCurrent(mA)
		if p.Signal.severity() > sig.severity() {
			sig = p.Signal
		}
		if sig != SignalNone {
			out.Flagged++
			warnings = append(warnings, fmt.Sprintf("%s reading of cycle %d: the output read %.3f mA, %s; used for the zero deviation as found", p.Kind, p.Cycle, mA, sig.Describe()))
		}
	}
	if m := loop.Meter; m.PercentOfReading == 0 && m.FloorMA == 0 {
		warnings = append(warnings, "loop meter uncertainty not configured: the current meter's term is left out of the output budget")
	}
	return out, warnings, nil
}

// outputBudget is a point's budget in mA: the pressure terms scaled by f,
// the device resolution replaced by the meter's when it has one, and the
// meter's certificate term at the measured current. Values sit in the
// Pa-named fields so that the shared combination and coverage apply.
func outputBudget(pressure []Contribution, loop Loop, measuredMA, f float64) []Contribution {
	m := loop.Meter
	terms := make([]Contribution, 0, len(pressure)+2)
	for _, c := range pressure {
		if c.Name == "resolution" && m.ResolutionMA > 0 {
			continue // the meter's resolution below stands for it
		}
		c.EstimatePa *= f
		c.StandardUncertaintyPa *= f
		terms = append(terms, c)
	}
	if u := m.PercentOfReading/100*math.Abs(measuredMA) + m.FloorMA; u > 0 {
		terms = append(terms, Contribution{Name: "loop_meter", Evaluated: true, EstimatePa: u, Distribution: "normal", Divisor: m.K, StandardUncertaintyPa: u / m.K})
	} else {
		terms = append(terms, notEvaluated("loop_meter", "no loop meter uncertainty configured"))
	}
	if m.ResolutionMA > 0 {
		terms = append(terms, rect("loop_meter_resolution", m.ResolutionMA, sqrt12))
	} else {
		terms = append(terms, notEvaluated("loop_meter_resolution", "no loop meter resolution configured: the device resolution is used"))
	}
	return terms
}
