package acquire

import (
	"testing"
	"time"

	"plateau/acquire/procedure"
	"plateau/config"
)

func TestPlanDurationAndWhatIsLeft(t *testing.T) {
	pr := config.Procedure{Hold: 5 * time.Second, TopHold: 20 * time.Second, ExerciseHold: 10 * time.Second, Timeout: 5 * time.Minute}
	pr.Settle.Window = 10 * time.Second
	steps := []procedure.Step{
		{Kind: procedure.StepExercise},               // 10 s at the top + 5 s hold at the bottom
		{Kind: procedure.StepCapture},                // 5 s hold + 10 s window (or 5 m time-out)
		{Kind: procedure.StepCapture, TopHold: true}, // and 20 s at the top first
	}
	least, most := PlanDuration(pr, steps)
	if least != 65*time.Second || most != 645*time.Second {
		t.Fatalf("plan takes %v … %v, want 1m5s … 10m45s", least, most)
	}

	e := &Engine{cfg: &config.Config{Procedure: pr}, steps: steps}
	t0 := time.Date(2026, 5, 4, 9, 0, 0, 0, time.UTC)
	for _, tc := range []struct {
		name      string
		v         runView
		step, run time.Duration
	}{
		{"from the plan until a step is timed", runView{Step: 1, StepSince: t0.Add(-5 * time.Second)}, 10 * time.Second, 45 * time.Second},
		{"steps so far took twice their plan", runView{Step: 1, StepSince: t0.Add(-5 * time.Second), Timed: 1, TimedFor: 30 * time.Second, TimedPlan: 15 * time.Second},
			25 * time.Second, 95 * time.Second},
		{"a step over its estimate has nothing left, the rest still counts", runView{Step: 1, StepSince: t0.Add(-time.Minute)}, 0, 35 * time.Second},
		{"the last step", runView{Step: 2, StepSince: t0}, 35 * time.Second, 35 * time.Second},
	} {
		t.Run(tc.name, func(t *testing.T) {
			step, run, ok := e.remaining(tc.v, t0)
			if !ok || step != tc.step || run != tc.run {
				t.Errorf("left: step %v, run %v (%t); want %v, %v", step, run, ok, tc.step, tc.run)
			}
		})
	}
	if _, _, ok := (&Engine{cfg: e.cfg}).remaining(runView{}, t0); ok {
		t.Error("a free run has no plan to estimate from")
	}
}
