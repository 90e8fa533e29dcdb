package acquire

import (
	"time"

	"plateau/acquire/procedure"
	"plateau/config"
)

// PlanDuration bounds how long the steps of a plan take: each capture waits
// its hold and one full settle window at least, its time-out at most; the
// first descending capture of a cycle dwells at the top first; an exercise
// dwells at full scale, then holds at the bottom. Reaching each pressure
// comes on top. Check, start and the space check all read it, so they agree.
func PlanDuration(pr config.Procedure, steps []procedure.Step) (least, most time.Duration) {
	for _, s := range steps {
		switch s.Kind {
		case procedure.StepExercise:
			least += pr.ExerciseHold + pr.Hold
			most += pr.ExerciseHold + pr.Hold
		case procedure.StepCapture:
			least += pr.Hold + pr.Settle.Window
			most += pr.Hold + max(pr.Timeout, pr.Settle.Window)
			if s.TopHold {
				least += pr.TopHold
				most += pr.TopHold
			}
		}
	}
	return least, most
}

// stepPlan is the least time step i of the plan takes.
func (e *Engine) stepPlan(i int) time.Duration {
	if i < 0 || i >= len(e.steps) {
		return 0
	}
	least, _ := PlanDuration(e.cfg.Procedure, e.steps[i:i+1])
	return least
}

// remaining estimates what the current step and the run still need: the
// plan's time for them, scaled by how long the finished steps took against
// their plan. A free run has no plan to estimate from.
func (e *Engine) remaining(v runView, now time.Time) (step, run time.Duration, ok bool) {
	if len(e.steps) == 0 || v.Step >= len(e.steps) {
		return 0, 0, false
	}
	scale := 1.0
	if v.Timed > 0 && v.TimedPlan > 0 {
		scale = float64(v.TimedFor) / float64(v.TimedPlan)
	}
	scaled := func(d time.Duration) time.Duration { return time.Duration(scale * float64(d)) }
	step = max(scaled(e.stepPlan(v.Step))-now.Sub(v.StepSince), 0)
	rest, _ := PlanDuration(e.cfg.Procedure, e.steps[v.Step+1:])
	return step, step + scaled(rest), true
}

// Plan is the configured plan's steps (none in free mode); callers must not
// change it.
func (e *Engine) Plan() []procedure.Step { return e.steps }
