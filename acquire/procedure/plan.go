// Package procedure is the calibration procedure: the plan of steps, and
// the runner that drives the pressure (or asks a person to), approaches each
// point from its side and captures a comparison point when the reference and
// the device are settled over shared windows. It works through narrow
// interfaces (the source, the instruments' settled windows, the record, a
// pause gate, the clock) and knows nothing of wire formats or storage.
package procedure

import (
	"fmt"

	"plateau/analysis"
	"plateau/config"
)

// Mode says how a run finds its points.
type Mode string

const (
	Planned Mode = "plan" // follow the configured points
	Free    Mode = "free" // every plateau both instruments hold becomes a point
)

// StepKind is what the runner does at one step of a plan.
type StepKind string

const (
	StepExercise StepKind = "exercise" // go to full scale, dwell, come back down
	StepCapture  StepKind = "capture"  // bring the pressure to a target and capture a point
)

// Step is one entry of a procedure plan. Steps are numbered by their position
// in the plan; the run's resume cursor is that number.
type Step struct {
	Kind      StepKind
	Cycle     int // measuring cycle (1-based); the exercise number for StepExercise
	Direction analysis.Direction
	PointKind analysis.PointKind
	Index     int     // position of the nominal in the procedure's point list
	TargetPa  float64 // nominal pressure
	// TopHold is an extra dwell before this capture: the wait at the top
	// before the first descending point.
	TopHold bool
}

func (s Step) String() string {
	switch s.Kind {
	case StepExercise:
		return fmt.Sprintf("exercise %d to full scale", s.Cycle)
	}
	switch s.PointKind {
	case analysis.ZeroBefore:
		return fmt.Sprintf("cycle %d zero before", s.Cycle)
	case analysis.ZeroAfter:
		return fmt.Sprintf("cycle %d zero after", s.Cycle)
	}
	return fmt.Sprintf("cycle %d %s point %d", s.Cycle, s.Direction, s.Index+1)
}

// Key identifies a captured point of this step; the store keeps at most one
// point per key, so a resumed run never duplicates a point.
func (s Step) Key() string { return captureKey(s.Cycle, s.Direction, s.PointKind, s.Index) }

// captureKey is the one spelling of a point's identity, for steps and points alike.
func captureKey(cycle int, dir analysis.Direction, kind analysis.PointKind, index int) string {
	return fmt.Sprintf("%d/%s/%s/%d", cycle, dir, kind, index)
}

// Plan lays out a procedure: exercise cycles to full scale, then for each
// cycle a zero reading, an ascending series, a descending series (the top
// point is captured in both, after a dwell at the top) and a closing zero.
func Plan(p config.Procedure, lowerPa float64) []Step {
	pts := p.PointsPa
	if len(pts) == 0 {
		return nil
	}
	top := pts[len(pts)-1]
	var steps []Step
	for e := 1; e <= p.Exercise; e++ {
		steps = append(steps, Step{Kind: StepExercise, Cycle: e, TargetPa: top})
	}
	for c := 1; c <= p.Cycles; c++ {
		if p.Zero {
			steps = append(steps, Step{Kind: StepCapture, Cycle: c, Direction: analysis.Ascending, PointKind: analysis.ZeroBefore, TargetPa: lowerPa})
		}
		for i, pa := range pts {
			steps = append(steps, Step{Kind: StepCapture, Cycle: c, Direction: analysis.Ascending, PointKind: analysis.Measurement, Index: i, TargetPa: pa})
		}
		for i := len(pts) - 1; i >= 0; i-- {
			steps = append(steps, Step{Kind: StepCapture, Cycle: c, Direction: analysis.Descending, PointKind: analysis.Measurement,
				Index: i, TargetPa: pts[i], TopHold: i == len(pts)-1})
		}
		if p.Zero {
			steps = append(steps, Step{Kind: StepCapture, Cycle: c, Direction: analysis.Descending, PointKind: analysis.ZeroAfter, TargetPa: lowerPa})
		}
	}
	return steps
}

// CaptureCount is the number of points a complete plan captures.
func CaptureCount(steps []Step) int {
	n := 0
	for _, s := range steps {
		if s.Kind == StepCapture {
			n++
		}
	}
	return n
}
