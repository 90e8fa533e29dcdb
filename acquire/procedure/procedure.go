package procedure

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"time"

	"plateau/acquire/poll"
	"plateau/analysis"
	"plateau/drivers"
	"plateau/drivers/clock"
)

// Source drives the pressure; nil when a person sets it.
type Source interface {
	SetPoint(ctx context.Context, pa float64) error
	Vent(ctx context.Context) error
}

// Reacher is a controller that says when it holds its setpoint.
type Reacher interface {
	Reached(ctx context.Context) (bool, error)
}

// Instrument is the procedure's view of a polled instrument: its settled
// window and a way to start the window afresh after a pressure change.
type Instrument interface {
	State() poll.State
	Restart(from time.Time, target float64, hasTarget bool)
}

// Dial is a device read by a person (or the simulated operator) once per
// point instead of being polled.
type Dial interface {
	Instrument
	Read(ctx context.Context) (drivers.Reading, error)
	SetWaiting(what string, targetPa float64)
}

// Record is where the procedure's results go. Point returns once the point
// is committed (after the samples of its windows); Event may be lossy for
// viewers but never blocks the procedure for long.
type Record interface {
	Captured() ([]analysis.Point, error)
	Point(p analysis.Point) error
	Cursor(step int) error
	Event(level slog.Level, typ, instrument, msg string, data any)
	Progress(step, points int, target float64, phase string)
}

// Gate holds the procedure while a run is paused (by a person or by the
// safety guard). Wait returns once the run may go on.
type Gate interface {
	Paused() bool
	Wait(ctx context.Context) error
}

// Compare says which instrument sets the pressure at a point.
type Compare string

const (
	// SetByReference sets the pressure by the reference and reads the device.
	SetByReference Compare = "set-by-reference"
	// SetByDevice brings the device's pointer onto the mark and reads the reference.
	SetByDevice Compare = "set-by-device"
)

// OnTimeout says what a point that cannot be captured in time does to the run.
type OnTimeout string

const (
	Skip OnTimeout = "skip" // mark the point missed and go on
	Stop OnTimeout = "stop" // end the run
)

// Settings are the procedure's numbers, resolved from the configuration.
type Settings struct {
	LowerPa, UpperPa float64 // the device's range
	ResolutionPa     float64
	BandPa           float64 // the reference must be within this of a target; 0 means 1 % of span
	Hold             time.Duration
	TopHold          time.Duration
	ExerciseHold     time.Duration
	Timeout          time.Duration // per point
	OnTimeout        OnTimeout
	Compare          Compare
}

// Procedure runs the steps of one run.
type Procedure struct {
	Steps    []Step // empty: a free run
	Settings Settings
	Source   Source  // nil: a person sets the pressure
	Reacher  Reacher // nil: the controller says nothing of reaching
	Ref      Instrument
	Devices  []Device // the devices under test, compared with Ref at every step
	Rec      Record
	Gate     Gate
	Clock    clock.Clock
	Tick     time.Duration // how often windows are looked at
	Format   func(pa float64) string
	Log      *slog.Logger

	setpoint float64     // the last pressure asked for
	timer    clock.Timer // sleep's wait, made on first use; Run's goroutine owns it
}

// Device is one device under test as the procedure sees it.
type Device struct {
	// Label names the device in its points and messages; empty when the
	// run calibrates one device (its points then carry no name, as before).
	Label string
	Inst  Instrument
	Dial  Dial // non-nil when a person reads it; Inst is then the same
}

func (d Device) name() string {
	if d.Label != "" {
		return d.Label
	}
	return "the device under test"
}

// doneKey identifies a captured point of one device.
func doneKey(device, key string) string { return device + "|" + key }

// Missed says why a point could not be captured.
type Missed struct{ Why string }

func (m *Missed) Error() string { return m.Why }

// errPaused interrupts a step when the run is paused; the step is done
// again from its approach once the run goes on.
var errPaused = errors.New("paused")

func (p *Procedure) format(pa float64) string {
	if p.Format == nil {
		return fmt.Sprintf("%.1f Pa", pa)
	}
	return p.Format(pa)
}

// Run executes the plan from step from (a free run when there are no
// steps) until it is done, ctx ends or a step fails for good.
func (p *Procedure) Run(ctx context.Context, from int) error {
	if p.Log == nil {
		p.Log = slog.New(slog.DiscardHandler)
	}
	if len(p.Steps) == 0 {
		return p.free(ctx)
	}
	existing, err := p.Rec.Captured()
	if err != nil {
		return fmt.Errorf("read captured points: %w", err)
	}
	// done holds the points of the steps ahead only, and each step's are
	// forgotten once it is over: the plan never comes back to a step, so a
	// run of many cycles keeps no memory per step behind it.
	ahead := map[string]bool{}
	for _, s := range p.Steps[min(from, len(p.Steps)):] {
		ahead[s.Key()] = true
	}
	done := map[string]bool{}
	for _, pt := range existing {
		if k := PointKey(pt); ahead[k] {
			done[doneKey(pt.Device, k)] = true
		}
	}
	points := len(existing)
	p.Rec.Progress(from, points, 0, "")
	for i := from; i < len(p.Steps); i++ {
		s := p.Steps[i]
		if err := p.Rec.Cursor(i); err != nil {
			return err
		}
		if s.Kind == StepCapture && len(p.pending(s, done)) == 0 {
			p.forget(s, done)
			continue // captured before a restart
		}
		for {
			if err := p.Gate.Wait(ctx); err != nil {
				return err
			}
			p.Rec.Progress(i, points, s.TargetPa, s.String())
			p.Rec.Event(slog.LevelInfo, "step", "", fmt.Sprintf("step %d/%d: %s, target %s", i+1, len(p.Steps), s, p.format(s.TargetPa)),
				map[string]any{"step": i, "target_pa": s.TargetPa})
			var missed *Missed
			var err error
			if s.Kind == StepExercise {
				err = p.exercise(ctx, s, i)
			} else {
				missed, err = p.captureAll(ctx, s, i, done, &points)
			}
			if errors.Is(err, errPaused) || (err != nil && ctx.Err() == nil && p.Gate.Paused()) {
				continue // do the step again, for what it still lacks, once the run goes on
			}
			if errors.As(err, &missed) {
				// An exercise step that cannot reach its pressure.
				p.Rec.Event(slog.LevelWarn, "missed", "", fmt.Sprintf("%s: %s", s, missed.Why), map[string]any{"step": i})
				err, missed = nil, nil
			}
			if err != nil {
				return err
			}
			if missed != nil && p.Settings.OnTimeout == Stop {
				return fmt.Errorf("%s not captured: %s", s, missed.Why)
			}
			break
		}
		p.forget(s, done)
	}
	return p.Rec.Cursor(len(p.Steps))
}

// forget drops step s from done once it is over.
func (p *Procedure) forget(s Step, done map[string]bool) {
	for _, d := range p.Devices {
		delete(done, doneKey(d.Label, s.Key()))
	}
}

// pending lists the devices that still lack their point of step s.
func (p *Procedure) pending(s Step, done map[string]bool) []Device {
	var out []Device
	for _, d := range p.Devices {
		if !done[doneKey(d.Label, s.Key())] {
			out = append(out, d)
		}
	}
	return out
}

// PointKey matches Step.Key for a captured point.
func PointKey(pt analysis.Point) string { return captureKey(pt.Cycle, pt.Direction, pt.Kind, pt.Index) }

// sleep waits d of clock time, or until ctx ends or the run is paused.
func (p *Procedure) sleep(ctx context.Context, d time.Duration) error {
	if p.Gate.Paused() {
		return errPaused
	}
	if d <= 0 {
		return ctx.Err()
	}
	if p.timer == nil {
		p.timer = clock.NewTimer(p.Clock)
	}
	p.timer.Reset(d)
	select {
	case <-ctx.Done():
		p.timer.Stop()
		return ctx.Err()
	case <-p.timer.C():
	}
	if p.Gate.Paused() {
		return errPaused
	}
	return nil
}

func (p *Procedure) band() float64 {
	if b := p.Settings.BandPa; b > 0 {
		return b
	}
	return 0.01 * (p.Settings.UpperPa - p.Settings.LowerPa)
}

// margin is how far past a point the procedure retreats to approach it
// again from the right side.
func (p *Procedure) margin() float64 {
	return math.Max(2*p.band(), 0.05*(p.Settings.UpperPa-p.Settings.LowerPa))
}

// command sends one command to the source and, when it fails, sends it
// again until it succeeds, ctx ends, the run is paused or the point
// time-out has passed: a setpoint or vent lost to one dropped reply or a
// short link outage must not end an unattended run. Both commands are
// idempotent, so a repeat of one that did arrive does no harm.
func (p *Procedure) command(ctx context.Context, what string, do func(context.Context) error) error {
	deadline := p.Clock.Now().Add(p.Settings.Timeout)
	wait := p.Tick
	for attempt := 1; ; attempt++ {
		err := do(ctx)
		if err == nil || ctx.Err() != nil || p.Clock.Now().After(deadline) {
			return err
		}
		if p.Gate.Paused() {
			return errPaused
		}
		if attempt == 1 {
			p.Rec.Event(slog.LevelWarn, "source", "", fmt.Sprintf("%s failed, sending it again: %v", what, err), nil)
		} else {
			p.Log.Warn("source command failed, sending it again", "command", what, "attempt", attempt, "err", err)
		}
		if err := p.sleep(ctx, wait); err != nil {
			return err
		}
		wait = min(2*wait, 10*time.Second)
	}
}

// setPressure drives the source, or asks a person to set the pressure.
func (p *Procedure) setPressure(ctx context.Context, target float64, how string) error {
	if p.Source == nil {
		msg := fmt.Sprintf("set the pressure to %s", p.format(target))
		if how != "" {
			msg += " " + how
		}
		p.Rec.Event(slog.LevelInfo, "operator", "", msg, map[string]float64{"target_pa": target})
		return nil
	}
	p.setpoint = target
	what := "setpoint " + p.format(target)
	if err := p.command(ctx, what, func(ctx context.Context) error { return p.Source.SetPoint(ctx, target) }); err != nil {
		if errors.Is(err, errPaused) {
			return err
		}
		return fmt.Errorf("%s: %w", what, err)
	}
	return nil
}

// vent opens the source to atmosphere, or asks a person to.
func (p *Procedure) vent(ctx context.Context, why string) error {
	if p.Source == nil {
		return p.setPressure(ctx, p.Settings.LowerPa, "(vent the system "+why+")")
	}
	if err := p.command(ctx, "vent "+why, p.Source.Vent); err != nil {
		if errors.Is(err, errPaused) {
			return err
		}
		return fmt.Errorf("vent %s: %w", why, err)
	}
	return nil
}

// waitNear waits until the reference is within the band of target, for at
// most the point time-out.
func (p *Procedure) waitNear(ctx context.Context, target float64) error {
	deadline := p.Clock.Now().Add(p.Settings.Timeout)
	for {
		st := p.Ref.State()
		if st.Reads > 0 && st.LastErr == "" && math.Abs(st.Last.Pa-target) <= p.band() {
			return nil
		}
		if p.Clock.Now().After(deadline) {
			return &Missed{fmt.Sprintf("the reference did not reach %s within %s", p.format(target), p.Settings.Timeout)}
		}
		if err := p.sleep(ctx, p.Tick); err != nil {
			return err
		}
	}
}

// reached says whether a controller that reports reaching its setpoint
// says it holds it: one more condition before a settled window counts.
// Without that ability, or when the flag cannot be read, the settle rule
// on the reference alone decides.
func (p *Procedure) reached(ctx context.Context) bool {
	if p.Reacher == nil || p.Source == nil {
		return true
	}
	ok, err := p.Reacher.Reached(ctx)
	if err != nil {
		p.Log.Warn("the controller's reached flag could not be read; going by the reference alone", "err", err)
		return true
	}
	return ok
}

func (p *Procedure) exercise(ctx context.Context, s Step, step int) error {
	if err := p.setPressure(ctx, s.TargetPa, "(exercise to full scale)"); err != nil {
		return err
	}
	if err := p.waitNear(ctx, s.TargetPa); err != nil {
		return err
	}
	if err := p.sleep(ctx, p.Settings.ExerciseHold); err != nil {
		return err
	}
	lower := p.Settings.LowerPa
	// The step's second half has its own target: status, the prompts and
	// a person working the pump must see "back to zero", not full scale.
	p.Rec.Progress(step, -1, lower, s.String()+", back to "+p.format(lower))
	if err := p.setPressure(ctx, lower, "(end of exercise)"); err != nil {
		return err
	}
	if err := p.waitNear(ctx, lower); err != nil {
		return err
	}
	return p.sleep(ctx, p.Settings.Hold)
}

// captureAll brings the pressure to the step's target from the step's side
// and, once the reference has settled after the hold, gives each device its
// own point as soon as it and the reference are settled over shared windows
// (the reference is shared). The step is done when every device has its
// point or has run out of time; a device that times out, or whose link is
// down, is marked missed and the others go on. It returns the first miss.
func (p *Procedure) captureAll(ctx context.Context, s Step, step int, done map[string]bool, points *int) (*Missed, error) {
	target := s.TargetPa
	up := s.Direction == analysis.Ascending
	note := ""
	var first *Missed
	miss := func(d Device, why string) {
		if first == nil {
			first = &Missed{why}
		}
		msg := fmt.Sprintf("%s: %s", s, why)
		if d.Label != "" {
			msg = fmt.Sprintf("%s: %s: %s", s, d.Label, why)
		}
		p.Rec.Event(slog.LevelWarn, "missed", d.Label, msg, map[string]any{"step": step, "device": d.Label})
		done[doneKey(d.Label, s.Key())] = true // nothing more to wait for at this step
	}
	commit := func(d Device, pt analysis.Point) error {
		pt.Device = d.Label
		if err := p.Rec.Point(pt); err != nil {
			return err
		}
		done[doneKey(d.Label, s.Key())] = true
		*points++
		return nil
	}
	for attempt := 0; ; attempt++ {
		pending := p.pending(s, done)
		if len(pending) == 0 {
			return first, nil
		}
		if err := p.approach(ctx, s, attempt > 0); err != nil {
			return first, err
		}
		changed := p.Clock.Now()
		hold := p.Settings.Hold
		if s.TopHold {
			hold += p.Settings.TopHold
		}
		// The hold is a wait before reading: only samples taken after it
		// can enter a settling window.
		counted := changed.Add(hold)
		p.Ref.Restart(counted, target, true)
		var polled, dials []Device
		for _, d := range pending {
			if d.Dial != nil {
				dials = append(dials, d)
				continue
			}
			d.Inst.Restart(counted, 0, false)
			polled = append(polled, d)
		}
		deadline := changed.Add(p.Settings.Timeout + hold)
		retry, ready := false, false
		for !retry && (len(polled) > 0 || !ready) {
			if err := p.sleep(ctx, p.Tick); err != nil {
				return first, err
			}
			rs := p.Ref.State()
			if wrongSide(rs.Window, target, p.band(), up) && s.PointKind == analysis.Measurement {
				if p.Source != nil && attempt < 3 {
					p.Rec.Event(slog.LevelWarn, "approach", rs.Name,
						fmt.Sprintf("%s: pressure went past the target; approaching again from %s", s, side(up)), nil)
					retry = true
					break
				}
				note = "approached from the wrong side"
			}
			now := p.Clock.Now()
			ready = now.Sub(changed) >= hold && rs.Settled && rs.Live(now, p.Tick) && (s.PointKind != analysis.Measurement || p.reached(ctx))
			if ready {
				var left []Device
				for _, d := range polled {
					ds := d.Inst.State()
					if poll.Paired(rs, ds, now, p.Tick) {
						if err := commit(d, analysis.Point{Cycle: s.Cycle, Direction: s.Direction, Kind: s.PointKind, Index: s.Index,
							Nominal: target, Reference: rs.Window, DUT: ds.Window, Note: note}); err != nil {
							return first, err
						}
						continue
					}
					// A device whose link is down while the reference is
					// ready and the others are served does not hold up the run.
					if down(ds, counted) && len(polled) > 1 && othersDone(polled, d, done, s) {
						miss(d, "no reading from it: "+ds.LastErr)
						continue
					}
					left = append(left, d)
				}
				polled = left
			}
			if now.After(deadline) {
				for _, d := range polled {
					why := "the reference did not settle"
					if rs.Settled {
						why = d.name() + " did not settle: " + orDown(d.Inst.State())
					} else if rs.Why != "" {
						why += ": " + rs.Why
					}
					miss(d, fmt.Sprintf("not settled within %s (%s)", p.Settings.Timeout, why))
				}
				polled = nil
				if !ready {
					for _, d := range dials {
						miss(d, fmt.Sprintf("the reference did not settle within %s", p.Settings.Timeout))
					}
					return first, nil
				}
			}
		}
		if retry {
			continue
		}
		for _, d := range dials {
			pt, err := p.captureDial(ctx, s, d, note)
			var m *Missed
			if errors.As(err, &m) {
				miss(d, m.Why)
				continue
			}
			if err != nil {
				return first, err
			}
			if err := commit(d, pt); err != nil {
				return first, err
			}
		}
		return first, nil
	}
}

// down says whether an instrument has given no good reading since from.
func down(st poll.State, from time.Time) bool {
	return st.LastErr != "" && st.Last.Time.Before(from)
}

func othersDone(polled []Device, d Device, done map[string]bool, s Step) bool {
	for _, o := range polled {
		if o.Label != d.Label && !done[doneKey(o.Label, s.Key())] {
			return false
		}
	}
	return true
}

func orDown(st poll.State) string {
	if st.LastErr != "" {
		return st.LastErr
	}
	return st.Why
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
func (p *Procedure) approach(ctx context.Context, s Step, careful bool) error {
	target := s.TargetPa
	if s.PointKind != analysis.Measurement {
		return p.vent(ctx, "for the zero reading")
	}
	up := s.Direction == analysis.Ascending
	last := p.Ref.State().Last.Pa
	lower, upper := p.Settings.LowerPa, p.Settings.UpperPa
	if p.Source != nil && (careful || (up && last > target+p.band()) || (!up && last < target-p.band())) {
		via := target - p.margin()
		if !up {
			via = target + p.margin()
		}
		via = math.Max(lower, math.Min(upper, via))
		if via != target {
			if err := p.setPressure(ctx, via, ""); err != nil {
				return err
			}
			if err := p.waitNear(ctx, via); err != nil {
				return err
			}
			if careful {
				if err := p.creep(ctx, target, via); err != nil {
					return err
				}
			}
		}
	}
	how := "(rising to it from below)"
	if !up {
		how = "(falling to it from above)"
	}
	return p.setPressure(ctx, target, how)
}

// creep closes in on target from a steady pressure at from, in steps of
// two thirds of the remaining distance, each waited out until the
// reference holds steady. A controller that overshoots by less than half a
// step then never carries the pressure past the target, and the last step
// (which the caller makes) is no larger than the device's resolution, so
// its overshoot stays inside the device's dead band and the pointer stays
// on the branch of the series' direction (common practice: approach a
// point slowly and never reverse onto it).
func (p *Procedure) creep(ctx context.Context, target, from float64) error {
	fine := math.Max(p.Settings.ResolutionPa, 1e-4*(p.Settings.UpperPa-p.Settings.LowerPa))
	for d := from - target; ; d /= 3 {
		if err := p.waitSteady(ctx, target+d); err != nil {
			return err
		}
		if math.Abs(d) <= fine {
			return nil
		}
		if err := p.setPressure(ctx, target+d/3, ""); err != nil {
			return err
		}
	}
}

// waitSteady waits until the reference is settled within the band of pa,
// for at most the point time-out.
func (p *Procedure) waitSteady(ctx context.Context, pa float64) error {
	from := p.Clock.Now()
	p.Ref.Restart(from, pa, true)
	deadline := from.Add(p.Settings.Timeout)
	for !p.Ref.State().Settled {
		if p.Clock.Now().After(deadline) {
			return &Missed{fmt.Sprintf("the reference did not hold steady at %s within %s", p.format(pa), p.Settings.Timeout)}
		}
		if err := p.sleep(ctx, p.Tick); err != nil {
			return err
		}
	}
	return nil
}

// waitReferenceSettled waits until the reference holds a live settled window.
func (p *Procedure) waitReferenceSettled(ctx context.Context, deadline time.Time) error {
	for {
		now := p.Clock.Now()
		if st := p.Ref.State(); st.Settled && st.Live(now, p.Tick) {
			return nil
		}
		if now.After(deadline) {
			return &Missed{"the reference did not settle: " + p.Ref.State().Why}
		}
		if err := p.sleep(ctx, p.Tick); err != nil {
			return err
		}
	}
}
