package acquire

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"time"

	"plateau/acquire/settle"
	"plateau/acquire/store"
	"plateau/analysis"
)

// runner executes the plan of one run from its cursor, then records how the
// run ended. A run whose context ended because the daemon is shutting down
// is left as it is in the store, to be resumed by the next start.
func (e *Engine) runner(ctx context.Context, r *activeRun) {
	defer func() {
		e.mu.Lock()
		if e.run == r {
			e.run = nil
		}
		e.mu.Unlock()
		close(r.done)
	}()
	var err error
	if len(e.steps) == 0 {
		err = e.freeRun(ctx, r)
	} else {
		err = e.execute(ctx, r)
	}
	cause := context.Cause(ctx)
	var stop *stopRequest
	var abort *abortError
	switch {
	case err == nil:
		e.ventQuietly()
		e.finish(r, store.StateFinished, "every step done", slog.LevelInfo)
	case errors.As(cause, &stop):
		e.ventQuietly()
		e.finish(r, store.StateStopped, stop.reason, slog.LevelWarn)
	case errors.As(cause, &abort):
		// The safety check vented once already; vent again in case that
		// command was lost on the link.
		e.ventQuietly()
		e.finish(r, store.StateFailed, abort.msg, slog.LevelError)
	case ctx.Err() != nil:
		// Shutdown: keep the run resumable, but never leave an unattended
		// bench under pressure; the resumed step approaches its point again.
		e.ventQuietly()
		r.final, r.reason = store.StateRunning, "interrupted by shutdown; source vented; resumes on next start"
		e.emit(r.id, slog.LevelWarn, "state", "", r.reason, nil)
	default:
		e.ventQuietly()
		e.finish(r, store.StateFailed, err.Error(), slog.LevelError)
	}
}

func (e *Engine) finish(r *activeRun, st store.State, reason string, level slog.Level) {
	r.final, r.reason = st, reason
	if _, err := e.st.SetState(r.id, st, reason); err != nil {
		e.log.Error("run state not stored", "run", r.id.String(), "err", err)
	}
	e.emit(r.id, level, "state", "", fmt.Sprintf("run %s %s: %s", r.id, st, reason), map[string]string{"state": string(st)})
}

func (e *Engine) ventQuietly() {
	if e.source == nil {
		return
	}
	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Second)
	defer cancel()
	if err := e.command(ctx, 0, "vent", e.source.Vent); err != nil {
		e.log.Error("vent failed: vent the system by hand before disconnecting", "err", err)
	}
}

// command sends one command to the source and, when it fails, sends it
// again until it succeeds, ctx ends or the point time-out has passed: a
// setpoint or vent lost to one dropped reply or a short link outage must
// not end an unattended run. Both commands are idempotent, so a repeat of
// one that did arrive does no harm. run 0 logs without an event.
func (e *Engine) command(ctx context.Context, run store.RunID, what string, do func(context.Context) error) error {
	deadline := e.clk.Now().Add(e.cfg.Procedure.Timeout)
	wait := e.tick()
	for attempt := 1; ; attempt++ {
		err := do(ctx)
		if err == nil || ctx.Err() != nil || e.clk.Now().After(deadline) {
			return err
		}
		if attempt == 1 && run != 0 {
			e.emit(run, slog.LevelWarn, "source", "", fmt.Sprintf("%s failed, sending it again: %v", what, err), nil)
		} else {
			e.log.Warn("source command failed, sending it again", "command", what, "attempt", attempt, "err", err)
		}
		select {
		case <-ctx.Done():
			return err
		case <-e.clk.After(wait):
		}
		wait = min(2*wait, 10*time.Second)
	}
}

func (e *Engine) execute(ctx context.Context, r *activeRun) error {
	existing, err := e.st.Points(r.id)
	if err != nil {
		return fmt.Errorf("read captured points: %w", err)
	}
	done := map[string]bool{}
	for _, p := range existing {
		done[pointKey(p)] = true
	}
	e.setProgress(r, r.step, len(existing), 0, "")
	for i := r.step; i < len(e.steps); i++ {
		s := e.steps[i]
		if err := e.saveCursor(r, i); err != nil {
			return err
		}
		if err := e.waitWhilePaused(ctx, r); err != nil {
			return err
		}
		if s.Kind == StepCapture && done[s.Key()] {
			continue // captured before a restart
		}
		e.setProgress(r, i, -1, s.TargetPa, s.String())
		e.emit(r.id, slog.LevelInfo, "step", "", fmt.Sprintf("step %d/%d: %s, target %s", i+1, len(e.steps), s, e.fmtPa(s.TargetPa)),
			map[string]any{"step": i, "target_pa": s.TargetPa})
		if s.Kind == StepExercise {
			if err := e.exercise(ctx, r, s); err != nil {
				return err
			}
			continue
		}
		p, err := e.capture(ctx, r, s)
		var missed *missedError
		if errors.As(err, &missed) {
			e.emit(r.id, slog.LevelWarn, "missed", "", fmt.Sprintf("%s: %s", s, missed.why), map[string]any{"step": i})
			if e.cfg.Procedure.OnTimeout == "stop" {
				return fmt.Errorf("%s not captured: %s", s, missed.why)
			}
			continue
		}
		if err != nil {
			return err
		}
		if err := e.commitPoint(r, p); err != nil {
			return err
		}
		done[s.Key()] = true
	}
	return e.saveCursor(r, len(e.steps))
}

// pointKey matches Step.Key for a captured point.
func pointKey(p analysis.Point) string { return captureKey(p.Cycle, p.Direction, p.Kind, p.Index) }

func (e *Engine) commitPoint(r *activeRun, p analysis.Point) error {
	_, existed, err := e.st.AddPoint(r.id, p)
	if err != nil {
		return fmt.Errorf("store point: %w", err)
	}
	if existed {
		return nil
	}
	e.mu.Lock()
	r.points++
	e.mu.Unlock()
	e.emit(r.id, slog.LevelInfo, "point", "",
		fmt.Sprintf("captured %s: reference %s, device %s (error %s)", describePoint(p), e.fmtPa(p.Reference.Mean), e.fmtPa(p.DUT.Mean), e.fmtPa(p.DUT.Mean-p.Reference.Mean)),
		p)
	return nil
}

func describePoint(p analysis.Point) string {
	switch p.Kind {
	case analysis.ZeroBefore, analysis.ZeroAfter:
		return fmt.Sprintf("cycle %d %s", p.Cycle, p.Kind)
	}
	return fmt.Sprintf("cycle %d %s point %d", p.Cycle, p.Direction, p.Index+1)
}

func (e *Engine) fmtPa(pa float64) string {
	u := e.cfg.Device.Unit
	if u == "" {
		return fmt.Sprintf("%.6g Pa", pa)
	}
	return formatIn(pa, u)
}

func (e *Engine) saveCursor(r *activeRun, step int) error {
	b, _ := json.Marshal(cursor{Step: step, Plan: e.plan})
	if _, err := e.st.SetCursor(r.id, b); err != nil {
		return fmt.Errorf("store cursor: %w", err)
	}
	return nil
}

func (e *Engine) setProgress(r *activeRun, step, points int, target float64, phase string) {
	e.mu.Lock()
	defer e.mu.Unlock()
	r.step = step
	if points >= 0 {
		r.points = points
	}
	r.target, r.phase = target, phase
}

func (e *Engine) waitWhilePaused(ctx context.Context, r *activeRun) error {
	for {
		e.mu.Lock()
		paused, resume := r.paused, r.resume
		e.mu.Unlock()
		if !paused {
			return nil
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-resume:
		}
	}
}

// sleep waits d of clock time, or until ctx ends.
func (e *Engine) sleep(ctx context.Context, d time.Duration) error {
	if d <= 0 {
		return ctx.Err()
	}
	select {
	case <-ctx.Done():
		return ctx.Err()
	case <-e.clk.After(d):
		return nil
	}
}

// tick is how often the runner looks at the detectors.
func (e *Engine) tick() time.Duration {
	t := e.ref.interval
	if e.dut.interval < t {
		t = e.dut.interval
	}
	return t
}

func (e *Engine) band() float64 {
	if b := e.cfg.Procedure.Settle.BandPa; b > 0 {
		return b
	}
	return 0.01 * (e.cfg.Device.UpperPa - e.cfg.Device.LowerPa)
}

// margin is how far past a point the runner retreats to approach it again
// from the right side.
func (e *Engine) margin() float64 {
	return math.Max(2*e.band(), 0.05*(e.cfg.Device.UpperPa-e.cfg.Device.LowerPa))
}

// setPressure drives the source, or asks a person to set the pressure.
func (e *Engine) setPressure(ctx context.Context, r *activeRun, target float64, how string) error {
	if lim := e.cfg.Safety; lim.Set && target > lim.MaxPressurePa {
		// Never ask for more than the limit, whatever computed the target.
		return fmt.Errorf("setpoint %s refused: above the safety limit %s", e.fmtPa(target), e.fmtPa(lim.MaxPressurePa))
	}
	if e.source == nil {
		e.emit(r.id, slog.LevelInfo, "operator", "", fmt.Sprintf("set the pressure to %s %s", e.fmtPa(target), how), map[string]float64{"target_pa": target})
		return nil
	}
	e.setpoint = target
	what := "setpoint " + e.fmtPa(target)
	if err := e.command(ctx, r.id, what, func(ctx context.Context) error { return e.source.SetPoint(ctx, target) }); err != nil {
		return fmt.Errorf("%s: %w", what, err)
	}
	return nil
}

// waitNear waits until the reference is within the band of target, for at
// most the point time-out.
func (e *Engine) waitNear(ctx context.Context, target float64) error {
	deadline := e.clk.Now().Add(e.cfg.Procedure.Timeout)
	for {
		st := e.ref.State()
		if st.Reads > 0 && st.LastErr == "" && math.Abs(st.Last.Pa-target) <= e.band() {
			return nil
		}
		if e.clk.Now().After(deadline) {
			return &missedError{fmt.Sprintf("the reference did not reach %s within %s", e.fmtPa(target), e.cfg.Procedure.Timeout)}
		}
		if err := e.sleep(ctx, e.tick()); err != nil {
			return err
		}
	}
}

func (e *Engine) exercise(ctx context.Context, r *activeRun, s Step) error {
	if err := e.setPressure(ctx, r, s.TargetPa, "(exercise to full scale)"); err != nil {
		return err
	}
	if err := e.waitNear(ctx, s.TargetPa); err != nil {
		return err
	}
	if err := e.sleep(ctx, e.cfg.Procedure.ExerciseHold); err != nil {
		return err
	}
	lower := e.cfg.Device.LowerPa
	if err := e.setPressure(ctx, r, lower, "(end of exercise)"); err != nil {
		return err
	}
	if err := e.waitNear(ctx, lower); err != nil {
		return err
	}
	return e.sleep(ctx, e.cfg.Procedure.Hold)
}

type missedError struct{ why string }

func (m *missedError) Error() string { return m.why }

// capture brings the pressure to the step's target from the step's side and
// waits until the reference and the device are settled over the same window
// after the hold time.
func (e *Engine) capture(ctx context.Context, r *activeRun, s Step) (analysis.Point, error) {
	target := s.TargetPa
	up := s.Direction == analysis.Ascending
	note := ""
	for attempt := 0; ; attempt++ {
		if err := e.approach(ctx, r, s, attempt > 0); err != nil {
			return analysis.Point{}, err
		}
		changed := e.clk.Now()
		hold := e.cfg.Procedure.Hold
		if s.TopHold {
			hold += e.cfg.Procedure.TopHold
		}
		// The hold is a wait before reading: only samples taken after it
		// can enter a settling window.
		e.ref.restart(changed.Add(hold), target, true)
		e.dut.restart(changed.Add(hold), 0, false)
		deadline := changed.Add(e.cfg.Procedure.Timeout + hold)
		retry := false
		for !retry {
			if err := e.sleep(ctx, e.tick()); err != nil {
				return analysis.Point{}, err
			}
			e.mu.Lock()
			paused := r.paused
			e.mu.Unlock()
			if paused {
				if err := e.waitWhilePaused(ctx, r); err != nil {
					return analysis.Point{}, err
				}
				retry = true // approach again after a pause
				break
			}
			rs := e.ref.State()
			if wrongSide(rs.Window, target, e.band(), up) && s.PointKind == analysis.Measurement {
				if e.source != nil && attempt < 3 {
					e.emit(r.id, slog.LevelWarn, "approach", e.ref.Name,
						fmt.Sprintf("%s: pressure went past the target; approaching again from %s", s, side(up)), nil)
					retry = true
					break
				}
				note = "approached from the wrong side"
			}
			now := e.clk.Now()
			if now.Sub(changed) >= hold && rs.Settled && e.current(rs, now) {
				if e.dial != nil {
					return e.captureDial(ctx, r, s, note)
				}
				ds := e.dut.State()
				if settle.Both(rs.Settle, ds.Settle) && e.current(ds, now) {
					return analysis.Point{Cycle: s.Cycle, Direction: s.Direction, Kind: s.PointKind, Index: s.Index,
						Nominal: target, Reference: rs.Window, DUT: ds.Window, Note: note}, nil
				}
			}
			if now.After(deadline) {
				why := "the reference did not settle"
				if rs.Settled {
					why = "the device under test did not settle: " + e.dut.State().Why
				} else if rs.Why != "" {
					why += ": " + rs.Why
				}
				return analysis.Point{}, &missedError{fmt.Sprintf("not settled within %s (%s)", e.cfg.Procedure.Timeout, why)}
			}
		}
	}
}

// current says whether an instrument's settled window is still live: its
// last read succeeded and its window reaches to within about two readings of
// now. A detector whose instrument stopped answering keeps its last window,
// which must never be paired with a fresh one from the other instrument.
func (e *Engine) current(st PollerState, now time.Time) bool {
	return st.LastErr == "" && now.Sub(st.Window.End) <= 2*st.Every+e.tick()
}

func side(up bool) string {
	if up {
		return "below"
	}
	return "above"
}

// wrongSide says whether the settling window shows the pressure beyond the
// target band on the far side of the approach direction.
func wrongSide(w analysis.Window, target, band float64, up bool) bool {
	if w.Count == 0 {
		return false
	}
	if up {
		return w.Mean > target+band
	}
	return w.Mean < target-band
}

// approach sets the pressure so the target is reached from the series'
// side: ascending points from below, descending points from above. After
// the pressure went past the target once (careful), it retreats and creeps
// up on the target instead of stepping onto it.
func (e *Engine) approach(ctx context.Context, r *activeRun, s Step, careful bool) error {
	target := s.TargetPa
	if s.PointKind != analysis.Measurement {
		if e.source != nil {
			if err := e.command(ctx, r.id, "vent for the zero reading", e.source.Vent); err != nil {
				return fmt.Errorf("vent for the zero reading: %w", err)
			}
			return nil
		}
		return e.setPressure(ctx, r, target, "(vent the system for the zero reading)")
	}
	up := s.Direction == analysis.Ascending
	last := e.ref.State().Last.Pa
	lower, upper := e.cfg.Device.LowerPa, e.cfg.Device.UpperPa
	if e.source != nil && (careful || (up && last > target+e.band()) || (!up && last < target-e.band())) {
		via := target - e.margin()
		if !up {
			via = target + e.margin()
		}
		via = math.Max(lower, math.Min(upper, via))
		if via != target {
			if err := e.setPressure(ctx, r, via, ""); err != nil {
				return err
			}
			if err := e.waitNear(ctx, via); err != nil {
				return err
			}
			if careful {
				if err := e.creep(ctx, r, target, via); err != nil {
					return err
				}
			}
		}
	}
	how := "rising to it from below"
	if !up {
		how = "falling to it from above"
	}
	return e.setPressure(ctx, r, target, "("+how+")")
}

// creep closes in on target from a steady pressure at from, in steps of
// two thirds of the remaining distance, each waited out until the
// reference holds steady. A controller that overshoots by less than half a
// step then never carries the pressure past the target, and the last step
// (which the caller makes) is no larger than the device's resolution, so
// its overshoot stays inside the device's dead band and the pointer stays
// on the branch of the series' direction (common practice: approach a
// point slowly and never reverse onto it).
func (e *Engine) creep(ctx context.Context, r *activeRun, target, from float64) error {
	fine := math.Max(e.cfg.Device.ResolutionPa, 1e-4*(e.cfg.Device.UpperPa-e.cfg.Device.LowerPa))
	for d := from - target; ; d /= 3 {
		if err := e.waitSteady(ctx, target+d); err != nil {
			return err
		}
		if math.Abs(d) <= fine {
			return nil
		}
		if err := e.setPressure(ctx, r, target+d/3, ""); err != nil {
			return err
		}
	}
}

// waitSteady waits until the reference is settled within the band of pa,
// for at most the point time-out.
func (e *Engine) waitSteady(ctx context.Context, pa float64) error {
	from := e.clk.Now()
	e.ref.restart(from, pa, true)
	deadline := from.Add(e.cfg.Procedure.Timeout)
	for !e.ref.State().Settled {
		if e.clk.Now().After(deadline) {
			return &missedError{fmt.Sprintf("the reference did not hold steady at %s within %s", e.fmtPa(pa), e.cfg.Procedure.Timeout)}
		}
		if err := e.sleep(ctx, e.tick()); err != nil {
			return err
		}
	}
	return nil
}
