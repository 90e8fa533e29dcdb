package acquire

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"strconv"
	"strings"
	"time"

	"plateau/acquire/poll"
	"plateau/acquire/procedure"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/report"
	"plateau/analysis/units"
	"plateau/config/record"
	"plateau/drivers"
)

var (
	// ErrBusy is returned by Start while another run is active.
	ErrBusy = errors.New("a run is already active")
	// ErrNoRun is returned by Stop, Pause and Resume when no run is active.
	ErrNoRun = errors.New("no run is active")
)

// Status is a snapshot of the engine and its run, for the API and the
// progress display.
type Status struct {
	Run         string       `json:"run,omitempty"`
	State       string       `json:"state"`
	Reason      string       `json:"reason,omitempty"`
	Since       time.Time    `json:"since,omitzero"`
	Step        int          `json:"step"`
	Steps       int          `json:"steps"`
	Points      int          `json:"points"`
	TotalPoints int          `json:"total_points"`
	Phase       string       `json:"phase,omitempty"`
	TargetPa    float64      `json:"target_pa"`
	Instruments []poll.State `json:"instruments"`
	// Polled names the instruments with a poll loop (a dial read by a
	// person has none).
	Polled map[string]bool `json:"polled"`
	// Trip is why the safety guard is latched; empty when it is not.
	Trip string `json:"trip,omitempty"`
	// StoreFault is why the store cannot write; empty when it can.
	StoreFault string `json:"store_fault,omitempty"`
	// Expected is the least time the whole plan takes (holds, windows and
	// dwells; settling adds to it).
	Expected time.Duration `json:"expected_ns"`
	// StepLeft and RunLeft estimate how long the current step and the
	// whole run still need (clock time), when Estimated: the plan's time
	// for what is left, scaled by how long the steps so far took against
	// their plan (reaching pressure and settling add to the plan).
	StepLeft  time.Duration `json:"step_left_ns"`
	RunLeft   time.Duration `json:"run_left_ns"`
	Estimated bool          `json:"estimated"`
	// Held says that the run is paused with the source holding the step's
	// pressure (an operator's pause); a trip, a store fault and a restart
	// vent it instead.
	Held bool `json:"held"`
	// PointsCommitted counts points committed since the engine started.
	PointsCommitted uint64 `json:"points_committed"`
	// Last is the run that ended most recently in this process.
	Last *LastRun `json:"last,omitempty"`
}

// LastRun is how the last run ended.
type LastRun struct {
	Run    string `json:"run"`
	State  string `json:"state"`
	Reason string `json:"reason,omitempty"`
}

// Status reports the engine and its run. It never waits for a state write.
func (e *Engine) Status() Status {
	s := Status{State: "idle", Steps: len(e.steps), TotalPoints: procedure.CaptureCount(e.steps),
		PointsCommitted: e.committedPoints.Load(), Polled: map[string]bool{}, Expected: e.ExpectedDuration()}
	if v, ok := e.runs.snapshot(); ok {
		s.Run, s.State, s.Reason, s.Since = v.ID.String(), string(v.State), v.Reason, v.Since
		s.Step, s.Points, s.Phase, s.TargetPa = v.Step, v.Points, v.Phase, v.Target
		s.StepLeft, s.RunLeft, s.Estimated = e.remaining(v, e.clk.Now())
		s.Held = v.Held && v.State == store.StatePaused
	}
	if l := e.runs.last.Load(); l != nil {
		s.Last = &LastRun{Run: l.ID.String(), State: string(l.State), Reason: l.Reason}
	}
	if t, ok := e.guard.Tripped(); ok {
		s.Trip = t.Reason
	}
	if f := e.storeFault.Load(); f != nil {
		s.StoreFault = *f
	}
	for _, p := range e.pollers() {
		s.Instruments = append(s.Instruments, p.State())
		s.Polled[p.Name] = !e.readByPerson(p)
	}
	for _, in := range e.enteredStates() {
		s.Instruments = append(s.Instruments, in)
		s.Polled[in.Name] = false
	}
	return s
}

// Healthy reports why the engine cannot do its job (the store cannot
// write), or nil.
func (e *Engine) Healthy() error {
	if f := e.storeFault.Load(); f != nil {
		return errors.New(*f)
	}
	return nil
}

// Start creates a run and starts its procedure. Starting is a person's
// decision, so it clears a tripped safety guard.
func (e *Engine) Start(label string) (store.RunID, error) {
	return e.StartWith(label, CertificateFields{})
}

// CertificateFields are certificate fields given for one run when it
// starts; an empty one keeps the configuration's certificate section.
type CertificateFields struct {
	Number, Customer, Operator string
}

// StartWith is Start with certificate fields of this run frozen into its
// record in place of the configuration's.
func (e *Engine) StartWith(label string, cert CertificateFields) (store.RunID, error) {
	select {
	case <-e.ready:
	default:
		return 0, errors.New("start: the engine is not serving yet")
	}
	e.runs.mu.Lock()
	defer e.runs.mu.Unlock()
	if r := e.runs.active(); r != nil {
		return 0, fmt.Errorf("start: %w (%s)", ErrBusy, r.id)
	}
	if err := e.Healthy(); err != nil {
		return 0, fmt.Errorf("start: the store cannot write: %v", err)
	}
	if err := e.cfg.ReferenceExpired(e.clk.Now()); err != nil {
		return 0, fmt.Errorf("start: %w", err)
	}
	if err := e.checkSpace(); err != nil {
		return 0, fmt.Errorf("start: %w", err)
	}
	if e.cfg.Procedure.Decision == "" {
		return 0, errors.New("start: no decision rule: set procedure.decision to simple, guarded or four-state (ILAC-G8:09/2019 asks that the rule be agreed before measuring)")
	}
	frozen, err := withCertificate(e.record, cert)
	if err != nil {
		return 0, fmt.Errorf("start: %w", err)
	}
	run, err := e.st.CreateSoleRun(label, e.yaml, frozen)
	var unfinished *store.UnfinishedError
	if errors.As(err, &unfinished) {
		return 0, fmt.Errorf("start: %w: the store holds the unfinished run %s (%s); end it with plateau stop, or restart the daemon to resume it", ErrBusy, unfinished.Run, unfinished.State)
	}
	if err != nil {
		return 0, fmt.Errorf("start: %w", err)
	}
	if _, err := e.st.SetState(run.ID, store.StateRunning, "started"); err != nil {
		return 0, fmt.Errorf("start: %w", err)
	}
	e.guard.Clear()
	e.launch(run.ID, 0, false, "")
	return run.ID, nil
}

// launch starts the procedure of run id from step; e.runs.mu must be held.
func (e *Engine) launch(id store.RunID, step int, paused bool, why string) {
	ctx, cancel := context.WithCancelCause(e.serveCtx)
	r := &activeRun{id: id, cancel: cancel, done: make(chan struct{}), gate: newGate(paused, why)}
	st := store.StateRunning
	if paused {
		st = store.StatePaused
	}
	now := e.clk.Now()
	e.runs.begin(r, runView{ID: id, State: st, Reason: why, Step: step, Since: now, StepSince: now})
	e.samples.setRun(id)
	go e.execute(ctx, r, step)
}

type stopRequest struct{ reason string }

func (s *stopRequest) Error() string { return s.reason }

// Stop ends the active run by an operator's decision; the source is vented.
// With no active run, it ends a run the store still holds as unfinished (one
// whose last state write failed), so that a new run can start.
func (e *Engine) Stop(reason string) error {
	if reason == "" {
		reason = "stopped by operator"
	}
	r := e.runs.active()
	if r == nil {
		left, err := e.st.Unfinished()
		if err != nil {
			return fmt.Errorf("stop: %w", err)
		}
		if len(left) == 0 {
			return ErrNoRun
		}
		for _, u := range left {
			if _, err := e.st.SetState(u.ID, store.StateStopped, reason+" (it was left unfinished)"); err != nil {
				return fmt.Errorf("stop %s: %w", u.ID, err)
			}
			e.emit(u.ID, slog.LevelWarn, "state", "", fmt.Sprintf("run %s stopped: %s (it was left unfinished)", u.ID, reason), map[string]string{"state": string(store.StateStopped)})
		}
		return nil
	}
	r.cancel(&stopRequest{reason})
	<-r.done
	return nil
}

// Pause holds the run at the current step; the pressure is held where it is.
func (e *Engine) Pause() error {
	if e.source == nil {
		return e.pause("paused by operator", slog.LevelInfo)
	}
	return e.pause("paused by operator; the pressure is held", slog.LevelInfo)
}

func (e *Engine) pause(why string, level slog.Level) error {
	r := e.runs.active()
	if r == nil {
		return ErrNoRun
	}
	if !r.gate.set(true, why) {
		return nil
	}
	err := e.runs.setState(r.id, store.StatePaused, why, e.clk.Now())
	// Only this pause leaves the source at its setpoint: a trip, a store
	// fault and a restart vent it.
	e.runs.update(func(v *runView) {
		if v.ID == r.id {
			v.Held = e.source != nil
		}
	})
	e.emit(r.id, level, "state", "", why, map[string]string{"state": string(store.StatePaused)})
	return err
}

// Resume continues a paused run: a person has looked, so a tripped guard
// is cleared. It is refused while the store cannot write.
func (e *Engine) Resume() error {
	r := e.runs.active()
	if r == nil {
		return ErrNoRun
	}
	if err := e.Healthy(); err != nil {
		return fmt.Errorf("resume: the store still cannot write (%v): free space or mend the store first", err)
	}
	if n := e.samples.clearLost(); n > 0 {
		e.emit(r.id, slog.LevelWarn, "store", "", fmt.Sprintf("%d samples taken while the store could not keep up were not kept; no point uses them", n), nil)
	}
	e.guard.Clear()
	if !r.gate.set(false, "") {
		return nil
	}
	if err := e.runs.setState(r.id, store.StateRunning, "resumed", e.clk.Now()); err != nil {
		return err
	}
	e.emit(r.id, slog.LevelInfo, "state", "", "resumed", map[string]string{"state": string(store.StateRunning)})
	return nil
}

// Entry is an operator's reading of an analog dial.
type Entry struct {
	// Device names the dial when the run has several; empty for the only one.
	Device string
	Value  float64
	Unit   string
	// Confirmed: the operator has confirmed an entry that looked
	// implausible (outside the range, far from the target).
	Confirmed bool
}

// ErrNoStepWaiting refuses an entry when no step waits for one.
var ErrNoStepWaiting = errors.New("no step is waiting for a dial reading")

// ImplausibleError refuses an entry that looks wrong until it is confirmed.
type ImplausibleError struct{ Why string }

func (e *ImplausibleError) Error() string {
	return "the entry looks wrong: " + e.Why + "; check the dial and enter it again, or confirm it"
}

// Enter passes an operator's dial reading to the device under test. It is
// refused when no step waits for one, and, unless confirmed, when it lies
// outside the device's range or further from the step's target than
// procedure.entry_limit times the permissible error. Every entry taken,
// including one a later entry supersedes, is in the record as an event.
func (e *Engine) Enter(en Entry) error {
	if handled, err := e.enterAmbient(en); handled {
		return err
	}
	d, err := e.dialFor(en.Device)
	if err != nil {
		return err
	}
	if math.IsNaN(en.Value) || math.IsInf(en.Value, 0) {
		return errors.New("the reading must be a finite number")
	}
	u, err := units.Lookup(en.Unit)
	if err != nil {
		return fmt.Errorf("unit: %w", err)
	}
	st := d.poll.State()
	r := e.runs.active()
	if st.Waiting == "" || r == nil {
		where := "no run is active"
		if v, ok := e.runs.snapshot(); ok {
			where = fmt.Sprintf("run %s is at %s", v.ID, v.Phase)
		}
		return fmt.Errorf("%w (%s); enter the reading when the run asks for it", ErrNoStepWaiting, where)
	}
	pa := u.ToPa(en.Value)
	if !en.Confirmed {
		if why := e.implausible(d, pa, st.WaitingForPa); why != "" {
			return &ImplausibleError{Why: why}
		}
	}
	if err := d.enterer.Enter(en.Value, en.Unit, e.clk.Now()); err != nil {
		return err
	}
	note := ""
	if en.Confirmed {
		note = " (confirmed by the operator)"
	}
	e.emit(r.id, slog.LevelInfo, "entry", d.poll.Name, fmt.Sprintf("%s: dial read %s %s for %s%s", d.poll.Name,
		strconv.FormatFloat(en.Value, 'f', -1, 64), u.Symbol, st.Waiting, note),
		map[string]any{"value": en.Value, "unit": u.Symbol, "pa": pa, "target_pa": st.WaitingForPa, "confirmed": en.Confirmed})
	return nil
}

// dialFor finds the dial an entry is for: the named one; without a name,
// the only dial, or the only one a step is waiting for (the procedure asks
// several dials in turn), so an operator names a dial only when it is not
// clear which one the reading is for.
func (e *Engine) dialFor(name string) (*device, error) {
	var dials, waiting []*device
	for _, d := range e.devs {
		if d.enterer == nil {
			continue
		}
		if name != "" && d.poll.Name == name {
			return d, nil
		}
		dials = append(dials, d)
		if d.poll.State().Waiting != "" {
			waiting = append(waiting, d)
		}
	}
	switch {
	case len(dials) == 0:
		return nil, errors.New("no device under test is read by an operator (link kind manual)")
	case name != "":
		return nil, fmt.Errorf("no dial read by an operator is named %q; the dials are %s", name, dialNames(dials))
	case len(dials) == 1:
		return dials[0], nil
	case len(waiting) == 1:
		return waiting[0], nil
	case len(waiting) > 1:
		return nil, fmt.Errorf("several dials are waiting for a reading (%s): say which one the reading is for", dialNames(waiting))
	}
	return nil, fmt.Errorf("%w: none of the dials (%s) is waiting for a reading; enter it when the run asks for it", ErrNoStepWaiting, dialNames(dials))
}

func dialNames(ds []*device) string {
	names := make([]string, len(ds))
	for i, d := range ds {
		names[i] = d.poll.Name
	}
	return strings.Join(names, ", ")
}

// implausible says why an entry for dial d looks wrong, or "": judged on
// that dial's own range and permissible error.
func (e *Engine) implausible(d *device, pa, target float64) string {
	dev, _, _ := record.AnalysisInputs(e.cfg)
	if one, ok := record.Of(e.cfg).ForDevice(d.poll.Name); ok {
		dev = one.Device
	}
	span := dev.UpperPa - dev.LowerPa
	if pa < dev.LowerPa-0.1*span || pa > dev.UpperPa+0.1*span {
		return fmt.Sprintf("%s is outside the dial's range %s … %s", e.fmtPa(pa), e.fmtPa(dev.LowerPa), e.fmtPa(dev.UpperPa))
	}
	limit := e.cfg.Procedure.EntryLimit
	if limit <= 0 {
		limit = 5
	}
	if mpe := dev.MPE(target); mpe > 0 && math.Abs(pa-target) > limit*mpe {
		return fmt.Sprintf("%s is %s from the target %s, more than %g times the permissible error %s", e.fmtPa(pa), e.fmtPa(math.Abs(pa-target)), e.fmtPa(target), limit, e.fmtPa(mpe))
	}
	return ""
}

// Wait blocks until the active run (if any) has ended, and returns its final state.
func (e *Engine) Wait(ctx context.Context) (store.State, string) {
	r := e.runs.active()
	if r == nil {
		return "", ""
	}
	select {
	case <-r.done:
		return r.final, r.reason
	case <-ctx.Done():
		return "", ctx.Err().Error()
	}
}

// resumeUnfinished continues the newest run left running or paused, and
// closes older unfinished ones as failed (only one run is ever active).
func (e *Engine) resumeUnfinished() error {
	runs, err := e.st.Unfinished()
	if err != nil || len(runs) == 0 {
		return err
	}
	for _, old := range runs[:len(runs)-1] {
		reason := fmt.Sprintf("left unfinished when %s was started; closed at start-up", runs[len(runs)-1].ID)
		if _, err := e.st.SetState(old.ID, store.StateFailed, reason); err != nil {
			return fmt.Errorf("close the older unfinished run %s: %w", old.ID, err)
		}
		e.emit(old.ID, slog.LevelWarn, "state", "", fmt.Sprintf("run %s failed: %s", old.ID, reason), map[string]string{"state": string(store.StateFailed)})
	}
	r := runs[len(runs)-1]
	c, err := decodeCursor(r)
	if err != nil {
		return err
	}
	var reason string
	switch {
	case c.Plan != "" && c.Plan != e.plan:
		// The cursor counts steps of the plan the run started with; applied
		// to another plan it would mix points of two procedures in one run.
		reason = "the procedure in the configuration changed since this run started; its points are kept, start a new run"
	case c.Identity != "" && e.identity != "" && c.Identity != e.identity:
		reason = "the device under test or the reference in the configuration changed since this run started; its points are kept, start a new run"
	}
	if reason != "" {
		if _, err := e.st.SetState(r.ID, store.StateFailed, reason); err != nil {
			return err
		}
		e.emit(r.ID, slog.LevelError, "state", "", fmt.Sprintf("run %s not resumed: %s", r.ID, reason), map[string]string{"state": string(store.StateFailed)})
		return nil
	}
	total := len(e.steps)
	msg := fmt.Sprintf("resuming %s at step %d of %d after a restart", r.ID, c.Step+1, total)
	if total == 0 {
		msg = fmt.Sprintf("resuming the free run %s after a restart", r.ID)
	}
	// Status says the run was resumed, and a paused one that nothing is
	// held: the daemon vented the source when it stopped.
	why := "resumed after a restart"
	if r.State == store.StatePaused {
		why = strings.TrimSuffix(r.Reason, "; the pressure is held") + "; the source was vented when the daemon stopped"
		msg += " (still paused: " + why + ")"
	}
	e.runs.mu.Lock()
	e.launch(r.ID, c.Step, r.State == store.StatePaused, why)
	e.runs.mu.Unlock()
	e.emit(r.ID, slog.LevelInfo, "state", "", msg, nil)
	return nil
}

// execute runs the procedure of r, then records how the run ended. A run
// whose context ended because the daemon is shutting down is left as it is
// in the store, to be resumed by the next start.
func (e *Engine) execute(ctx context.Context, r *activeRun, from int) {
	defer func() {
		e.samples.setRun(0)
		e.runs.end(r)
		close(r.done)
	}()
	p := e.procedure(r)
	err := p.Run(ctx, from)
	cause := context.Cause(ctx)
	var stop *stopRequest
	e.ventQuietly()
	switch {
	case err == nil:
		e.finish(r, store.StateFinished, "every step done", slog.LevelInfo)
	case errors.As(cause, &stop):
		e.finish(r, store.StateStopped, stop.reason, slog.LevelWarn)
	case ctx.Err() != nil:
		// Shutdown: keep the run resumable, but never leave an unattended
		// bench under pressure; the resumed step approaches its point again.
		r.final, r.reason = store.StateRunning, "interrupted by shutdown; source vented; resumes on next start"
		e.emit(r.id, slog.LevelWarn, "state", "", r.reason, nil)
	default:
		e.finish(r, store.StateFailed, err.Error(), slog.LevelError)
	}
}

func (e *Engine) finish(r *activeRun, st store.State, reason string, level slog.Level) {
	r.final, r.reason = st, reason
	_ = e.runs.setState(r.id, st, reason, e.clk.Now()) // logged there; the start-up closes a run left open
	e.emit(r.id, level, "state", "", fmt.Sprintf("run %s %s: %s", r.id, st, reason), map[string]string{"state": string(st)})
}

func (e *Engine) ventQuietly() {
	if e.source == nil {
		return
	}
	for attempt := 1; attempt <= 3; attempt++ {
		ctx, cancel := context.WithTimeout(context.Background(), 3*time.Second)
		err := e.source.Vent(ctx)
		cancel()
		if err == nil {
			return
		}
		e.log.Error("vent failed: vent the system by hand before disconnecting", "attempt", attempt, "err", err)
	}
}

// procedure builds the procedure of run r on the engine's instruments.
func (e *Engine) procedure(r *activeRun) *procedure.Procedure {
	cfg := e.cfg
	p := &procedure.Procedure{
		Steps: e.steps,
		Settings: procedure.Settings{
			LowerPa: cfg.Device.LowerPa, UpperPa: cfg.Device.UpperPa, ResolutionPa: cfg.Device.ResolutionPa,
			BandPa: cfg.Procedure.Settle.BandPa, Hold: cfg.Procedure.Hold, TopHold: cfg.Procedure.TopHold,
			ExerciseHold: cfg.Procedure.ExerciseHold, Timeout: cfg.Procedure.Timeout,
			OnTimeout: procedure.OnTimeout(cfg.Procedure.OnTimeout), Compare: procedure.Compare(cfg.Procedure.Compare),
		},
		Ref: e.ref, Rec: &runRecorder{e: e, r: r}, Gate: r.gate,
		Clock: e.clk, Tick: e.tick(), Format: e.fmtPa, Log: e.log.With("run", r.id.String()),
	}
	if e.source != nil {
		p.Source = e.guard.Source()
		if rc, ok := e.source.(drivers.Reacher); ok {
			p.Reacher = rc
		}
	}
	for _, d := range e.devs {
		pd := procedure.Device{Label: d.label, Inst: d.poll}
		if d.byPerson {
			pd.Dial = d.poll
		}
		p.Devices = append(p.Devices, pd)
	}
	return p
}

// runRecorder is the procedure's record of one run.
type runRecorder struct {
	e *Engine
	r *activeRun
}

func (rr *runRecorder) Captured() ([]analysis.Point, error) { return rr.e.st.Points(rr.r.id) }

// Point commits a point once the samples of its windows are committed: a
// point is never stored without the samples behind it.
func (rr *runRecorder) Point(p analysis.Point) error {
	e := rr.e
	p = e.withAmbient(rr.r, p)
	if err := e.samples.flush(); err != nil {
		e.storeTrouble(err)
		return fmt.Errorf("the samples of %s could not be stored: %w", describePoint(p), err)
	}
	p.Signal = e.outputSignal(p)
	_, existed, err := e.st.AddPoint(rr.r.id, p)
	if err != nil {
		e.storeTrouble(err)
		return fmt.Errorf("store point: %w", err)
	}
	if existed {
		return nil
	}
	e.committedPoints.Add(1)
	e.runs.update(func(v *runView) {
		if v.ID == rr.r.id {
			v.Points++
		}
	})
	// The event names its device, so the log of a run of several tells
	// them apart.
	inst := p.Device
	if inst == "" && len(e.devs) == 1 {
		inst = e.devs[0].poll.Name
	}
	// A transmitter's output outside the NE 43 band is a finding of the
	// point, said where the engineer following the log sees it.
	flag := ""
	if p.Signal != analysis.SignalNone {
		flag = fmt.Sprintf("; output %s, %s", p.Signal, p.Signal.Describe())
	}
	e.emit(rr.r.id, slog.LevelInfo, "point", inst,
		fmt.Sprintf("captured %s: reference %s, device %s (error %s)%s", describePoint(p), e.fmtPa(p.Reference.Mean), e.fmtPa(p.DUT.Mean), e.fmtPa(p.DUT.Mean-p.Reference.Mean), flag),
		p)
	return nil
}

func (rr *runRecorder) Cursor(step int) error {
	b, _ := json.Marshal(cursor{Step: step, Plan: rr.e.plan, Identity: rr.e.identity})
	if _, err := rr.e.st.SetCursor(rr.r.id, b); err != nil {
		rr.e.storeTrouble(err)
		return fmt.Errorf("store cursor: %w", err)
	}
	return nil
}

func (rr *runRecorder) Event(level slog.Level, typ, instrument, msg string, data any) {
	rr.e.emit(rr.r.id, level, typ, instrument, msg, data)
}

func (rr *runRecorder) Progress(step, points int, target float64, phase string) {
	now := rr.e.clk.Now()
	rr.e.runs.update(func(v *runView) {
		if v.ID == rr.r.id {
			if step == v.Step+1 && !v.StepSince.IsZero() {
				v.Timed++
				v.TimedFor += now.Sub(v.StepSince)
				v.TimedPlan += rr.e.stepPlan(v.Step)
			}
			if step != v.Step || v.StepSince.IsZero() {
				v.StepSince = now
			}
			v.Step, v.Target, v.Phase = step, target, phase
			if points >= 0 {
				v.Points = points
			}
		}
	})
}

func describePoint(p analysis.Point) string {
	switch p.Kind {
	case analysis.ZeroBefore, analysis.ZeroAfter:
		return fmt.Sprintf("cycle %d %s", p.Cycle, p.Kind)
	}
	return fmt.Sprintf("cycle %d %s point %d", p.Cycle, p.Direction, p.Index+1)
}

// withCertificate is the frozen record with the run's own certificate
// fields, on the run and on each of its devices.
func withCertificate(frozen []byte, cert CertificateFields) ([]byte, error) {
	if cert == (CertificateFields{}) {
		return frozen, nil
	}
	r, err := record.Decode(frozen)
	if err != nil {
		return nil, err
	}
	set := func(c *report.Certificate) {
		for _, f := range []struct {
			to *string
			v  string
		}{{&c.Number, cert.Number}, {&c.Customer, cert.Customer}, {&c.Operator, cert.Operator}} {
			if f.v != "" {
				*f.to = f.v
			}
		}
	}
	set(&r.Info.Certificate)
	for i := range r.Devices {
		set(&r.Devices[i].Info.Certificate)
	}
	return r.Encode(), nil
}
