package acquire

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"plateau/acquire/settle"
	"plateau/acquire/store"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
)

// Options wire an engine together.
type Options struct {
	Config     *config.Config
	ConfigYAML []byte // the configuration as used, kept with each run
	Store      *store.Store
	Clock      clock.Clock
	Log        *slog.Logger
	// Resolve rewrites an instrument before it is opened; the simulated rig
	// uses it to point "sim" links at its real endpoints. nil keeps it as is.
	Resolve func(config.Instrument) (config.Instrument, error)
	// Dial, when set, reads the device under test instead of its configured
	// link, once per point: the simulated operator of a simulated dial.
	Dial drivers.Gauge
}

// Engine owns the instruments, their pollers and at most one active run.
type Engine struct {
	cfg   *config.Config
	yaml  []byte
	st    *store.Store
	clk   clock.Clock
	log   *slog.Logger
	bus   *Bus
	steps []Step

	ref, dut *Poller
	others   []*Poller
	source   drivers.Source
	manual   Enterer
	// dial is the device under test when a person reads it: it is read
	// once per point instead of being polled.
	dial     drivers.Gauge
	serveCtx context.Context
	ready    chan struct{} // closed once Serve has resumed any unfinished run
	closers  []func() error

	plan string // fingerprint of the plan, kept in each run's cursor
	// setpoint is the last pressure the runner asked for (runner goroutine only).
	setpoint float64
	// overPressure is set while the reference is above the safety limit.
	overPressure atomic.Bool

	mu      sync.Mutex
	run     *activeRun
	started bool
}

// Enterer takes an operator's reading of an analog dial.
type Enterer interface {
	Enter(value float64, unit string, at time.Time) error
}

type activeRun struct {
	id     store.RunID
	cancel context.CancelCauseFunc
	done   chan struct{}
	paused bool
	resume chan struct{}
	step   int
	points int
	target float64
	phase  string
	final  store.State
	reason string
}

// New opens every configured instrument and prepares a poller for each.
// An instrument that cannot be opened now is an error: the daemon reports it
// and its caller decides whether to retry.
func New(opt Options) (*Engine, error) {
	if opt.Config == nil || opt.Store == nil {
		return nil, errors.New("engine: config and store are required")
	}
	if opt.Clock == nil {
		opt.Clock = clock.Wall{}
	}
	if opt.Log == nil {
		opt.Log = slog.New(slog.DiscardHandler)
	}
	cfg := opt.Config
	e := &Engine{cfg: cfg, yaml: opt.ConfigYAML, st: opt.Store, clk: opt.Clock, log: opt.Log, bus: NewBus(),
		ready: make(chan struct{})}
	if cfg.Procedure.Mode == "plan" {
		e.steps = Plan(cfg.Procedure, cfg.Device.LowerPa)
	}
	e.plan = planPrint(cfg.Procedure.Mode, e.steps)
	env := drivers.OpenEnv{Log: opt.Log, Clock: opt.Clock}
	rules := settleRules(cfg)
	for _, inst := range cfg.Instruments {
		if opt.Resolve != nil {
			r, err := opt.Resolve(inst)
			if err != nil {
				e.Close()
				return nil, fmt.Errorf("instrument %q: %w", inst.Name, err)
			}
			inst = r
		}
		if inst.Role == config.RoleSource {
			src, err := drivers.OpenSource(inst, env)
			if err != nil {
				e.Close()
				return nil, err
			}
			e.source = src
			e.closers = append(e.closers, src.Close)
			// A source's own pressure reading is not needed by the runner.
			continue
		}
		var g drivers.Gauge
		if inst.Role == config.RoleDevice && opt.Dial != nil {
			g = opt.Dial
		} else {
			var err error
			if g, err = drivers.OpenGauge(inst, env); err != nil {
				e.Close()
				return nil, err
			}
		}
		e.closers = append(e.closers, g.Close)
		if m, ok := g.(Enterer); ok && inst.Role == config.RoleDevice {
			e.manual = m
		}
		r := rules
		if inst.Role == config.RoleDevice {
			r = deviceRules(rules, cfg.Device.ResolutionPa)
		}
		p, err := newPoller(inst.Name, g, inst.Poll, r, e.clk, e, opt.Log.With("instrument", inst.Name))
		if err != nil {
			e.Close()
			return nil, fmt.Errorf("instrument %q: %w", inst.Name, err)
		}
		switch inst.Role {
		case config.RoleReference:
			e.ref = p
			p.onRead = e.checkSafety
		case config.RoleDevice:
			e.dut = p
			if cfg.Device.Kind == "dial" || inst.Link.Kind == config.LinkManual || opt.Dial != nil {
				e.dial = g
			}
		default:
			e.others = append(e.others, p)
		}
	}
	if e.ref == nil || e.dut == nil {
		e.Close()
		return nil, errors.New("engine: a reference and a device under test are required")
	}
	return e, nil
}

func settleRules(cfg *config.Config) settle.Rules {
	s := cfg.Procedure.Settle
	return settle.Rules{
		Window: s.Window, MinSamples: s.MinCount,
		MaxDrift: s.MaxDriftPaPerS, MaxSpread: s.MaxSpreadPa, Band: s.BandPa,
	}
}

// deviceRules loosens the settle rule for the device under test to what its
// resolution can show: a display that flickers between two adjacent digits
// is settled (common practice), and a drift of less than one digit over the
// window cannot be told from that flicker.
func deviceRules(r settle.Rules, resolution float64) settle.Rules {
	if resolution <= 0 {
		return r
	}
	r.MaxSpread = math.Max(r.MaxSpread, resolution)
	if w := r.Window.Seconds(); w > 0 {
		r.MaxDrift = math.Max(r.MaxDrift, resolution/w)
	}
	r.Band = 0 // the target band is judged on the reference
	return r
}

// Bus is the live event feed.
func (e *Engine) Bus() *Bus { return e.bus }

// Close closes every instrument.
func (e *Engine) Close() error {
	var errs []error
	for _, c := range e.closers {
		errs = append(errs, c())
	}
	e.closers = nil
	return errors.Join(errs...)
}

// Serve polls every instrument and resumes an unfinished run, until ctx
// ends. On return the pollers have stopped and any active run is left
// resumable in the store.
func (e *Engine) Serve(ctx context.Context) error {
	e.mu.Lock()
	if e.started {
		e.mu.Unlock()
		return errors.New("engine: already serving")
	}
	e.started = true
	e.serveCtx = ctx
	e.mu.Unlock()

	var wg sync.WaitGroup
	for _, p := range e.pollers() {
		if p == e.dut && e.dial != nil {
			continue // read once per point, not polled
		}
		wg.Add(1)
		go func() { defer wg.Done(); p.run(ctx) }()
	}
	if err := e.resumeUnfinished(ctx); err != nil {
		e.emit(0, slog.LevelError, "resume", "", fmt.Sprintf("could not resume the unfinished run: %v", err), nil)
	}
	close(e.ready)
	<-ctx.Done()
	e.mu.Lock()
	r := e.run
	e.mu.Unlock()
	if r != nil {
		<-r.done // the runner notices ctx and leaves the run as it is
	}
	wg.Wait()
	return nil
}

func (e *Engine) pollers() []*Poller {
	return append([]*Poller{e.ref, e.dut}, e.others...)
}

// Sample implements SampleSink: every reading of an active run is stored.
func (e *Engine) Sample(instrument string, r drivers.Reading, err error) {
	e.mu.Lock()
	run := e.run
	e.mu.Unlock()
	if run == nil {
		return
	}
	if r.Time.IsZero() {
		r.Time = e.clk.Now()
	}
	// A sample racing the end of its run is refused by the store; it
	// belongs to no run, so that is not a fault.
	if serr := e.st.AddSample(run.id, instrument, r, err); serr != nil && !errors.Is(serr, store.ErrRunEnded) {
		e.log.Error("sample not stored", "instrument", instrument, "err", serr)
	}
}

// checkSafety runs on the reference poller for every reading: above the
// safety limit, or when the reference itself says it is over its range, the
// run is aborted (so that no further setpoint is sent) and the source vented
// at once. The alarm is raised once per excursion, not for every reading.
func (e *Engine) checkSafety(r drivers.Reading, err error) {
	lim := e.cfg.Safety
	var msg string
	switch {
	case err == nil && lim.Set && r.Pa > lim.MaxPressurePa:
		msg = fmt.Sprintf("over-pressure: reference reads %s, above the safety limit %s", e.fmtPa(r.Pa), e.fmtPa(lim.MaxPressurePa))
	case err != nil && drivers.KindOf(err) == drivers.KindOverload:
		msg = fmt.Sprintf("over-pressure: the reference reports over-range (%v)", err)
	case err != nil && drivers.KindOf(err) == drivers.KindOutOfRange && r.Raw > drivers.LoopValidHigh:
		msg = fmt.Sprintf("over-pressure: the reference's loop current is above its range (%v)", err)
	default:
		if err == nil {
			e.overPressure.Store(false) // back below the limit: the next excursion alarms again
		}
		return
	}
	if e.overPressure.Swap(true) {
		return // already handled this excursion
	}
	e.mu.Lock()
	run := e.run
	e.mu.Unlock()
	if run != nil {
		run.cancel(&abortError{msg + "; source vented, run aborted"})
	}
	vented := e.source != nil
	if vented {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		if verr := e.source.Vent(ctx); verr != nil {
			vented = false
			e.log.Error("vent after over-pressure failed: vent by hand", "err", verr)
		}
		cancel()
	}
	if run == nil {
		if vented {
			msg += "; source vented"
		}
		e.emit(0, slog.LevelError, "safety", e.ref.Name, msg, nil)
	}
}

type abortError struct{ msg string }

func (a *abortError) Error() string { return a.msg }

// emit commits an event to the store, then publishes it.
func (e *Engine) emit(run store.RunID, level slog.Level, typ, instrument, msg string, data any) {
	ev := store.Event{Time: e.clk.Now(), Run: run, Level: level, Instrument: instrument, Type: typ, Message: msg}
	if data != nil {
		if b, err := json.Marshal(data); err == nil {
			ev.Data = b
		}
	}
	e.log.Log(context.Background(), level, msg, "type", typ, "instrument", instrument, "run", run.String())
	id, err := e.st.AddEvent(ev)
	if err != nil {
		e.log.Error("event not stored", "err", err)
		return
	}
	ev.ID = id
	e.bus.Publish(ev)
}

// Status is a snapshot of the engine for the API and the progress display.
type Status struct {
	Run         string        `json:"run,omitempty"`
	State       string        `json:"state"`
	Step        int           `json:"step"`
	Steps       int           `json:"steps"`
	Points      int           `json:"points"`
	TotalPoints int           `json:"total_points"`
	Phase       string        `json:"phase,omitempty"`
	TargetPa    float64       `json:"target_pa"`
	Instruments []PollerState `json:"instruments"`
}

// Status reports the engine and its run.
func (e *Engine) Status() Status {
	s := Status{State: "idle", Steps: len(e.steps), TotalPoints: CaptureCount(e.steps)}
	e.mu.Lock()
	if r := e.run; r != nil {
		s.Run = r.id.String()
		s.State = string(store.StateRunning)
		if r.paused {
			s.State = string(store.StatePaused)
		}
		s.Step, s.Points, s.Phase, s.TargetPa = r.step, r.points, r.phase, r.target
	}
	e.mu.Unlock()
	for _, p := range e.pollers() {
		st := p.State()
		st.Polled = !(p == e.dut && e.dial != nil)
		s.Instruments = append(s.Instruments, st)
	}
	return s
}

var (
	// ErrBusy is returned by Start while another run is active.
	ErrBusy = errors.New("a run is already active")
	// ErrNoRun is returned by Stop, Pause and Resume when no run is active.
	ErrNoRun = errors.New("no run is active")
)

// Start creates a run and starts its runner.
func (e *Engine) Start(label string) (store.RunID, error) {
	select {
	case <-e.ready:
	default:
		return 0, errors.New("start: the engine is not serving yet")
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.run != nil {
		return 0, fmt.Errorf("start: %w (%s)", ErrBusy, e.run.id)
	}
	if exp := e.cfg.Reference.ExpiresAt; !exp.IsZero() && e.clk.Now().After(exp.Add(24*time.Hour)) {
		return 0, fmt.Errorf("start: the reference's calibration expired on %s; recalibrate it or correct reference.expires", e.cfg.Reference.Expires)
	}
	run, err := e.st.CreateRun(label, e.yaml)
	if err != nil {
		return 0, fmt.Errorf("start: %w", err)
	}
	if _, err := e.st.SetState(run.ID, store.StateRunning, "started"); err != nil {
		return 0, fmt.Errorf("start: %w", err)
	}
	e.launch(run.ID, 0, false)
	return run.ID, nil
}

// launch starts the runner goroutine from step; e.mu must be held.
func (e *Engine) launch(id store.RunID, step int, paused bool) {
	ctx, cancel := context.WithCancelCause(e.serveCtx)
	r := &activeRun{id: id, cancel: cancel, done: make(chan struct{}), paused: paused,
		resume: make(chan struct{}), step: step}
	e.run = r
	go e.runner(ctx, r)
}

// Stop ends the active run by an operator's decision; the source is vented.
func (e *Engine) Stop(reason string) error {
	e.mu.Lock()
	r := e.run
	e.mu.Unlock()
	if r == nil {
		return ErrNoRun
	}
	if reason == "" {
		reason = "stopped by operator"
	}
	r.cancel(&stopRequest{reason})
	<-r.done
	return nil
}

type stopRequest struct{ reason string }

func (s *stopRequest) Error() string { return s.reason }

// Pause holds the run at the current step; Resume re-approaches it.
func (e *Engine) Pause() error { return e.setPaused(true) }

// Resume continues a paused run.
func (e *Engine) Resume() error { return e.setPaused(false) }

func (e *Engine) setPaused(p bool) error {
	e.mu.Lock()
	r := e.run
	if r == nil {
		e.mu.Unlock()
		return ErrNoRun
	}
	if r.paused == p {
		e.mu.Unlock()
		return nil
	}
	r.paused = p
	if !p {
		close(r.resume)
		r.resume = make(chan struct{})
	}
	e.mu.Unlock()
	st := store.StateRunning
	msg := "resumed"
	if p {
		st, msg = store.StatePaused, "paused by operator"
	}
	if _, err := e.st.SetState(r.id, st, msg); err != nil {
		return err
	}
	e.emit(r.id, slog.LevelInfo, "state", "", msg, map[string]string{"state": string(st)})
	return nil
}

// Enter passes an operator's dial reading to the device under test.
func (e *Engine) Enter(value float64, unit string) error {
	if e.manual == nil {
		return errors.New("the device under test is not read by an operator (link kind manual)")
	}
	if math.IsNaN(value) || math.IsInf(value, 0) {
		return errors.New("the reading must be a finite number")
	}
	return e.manual.Enter(value, unit, e.clk.Now())
}

// Wait blocks until the active run (if any) has ended, and returns its final state.
func (e *Engine) Wait(ctx context.Context) (store.State, string) {
	e.mu.Lock()
	r := e.run
	e.mu.Unlock()
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

// resumeUnfinished continues the newest run left running or paused.
func (e *Engine) resumeUnfinished(ctx context.Context) error {
	runs, err := e.st.Unfinished()
	if err != nil || len(runs) == 0 {
		return err
	}
	r := runs[len(runs)-1]
	var c cursor
	if len(r.Cursor) > 0 {
		if err := json.Unmarshal(r.Cursor, &c); err != nil {
			return fmt.Errorf("run %s: cursor: %w", r.ID, err)
		}
	}
	if c.Plan != "" && c.Plan != e.plan {
		// The cursor counts steps of the plan the run started with; applied
		// to another plan it would mix points of two procedures in one run.
		reason := "the procedure in the configuration changed since this run started; its points are kept, start a new run"
		if _, err := e.st.SetState(r.ID, store.StateFailed, reason); err != nil {
			return err
		}
		e.emit(r.ID, slog.LevelError, "state", "", fmt.Sprintf("run %s not resumed: %s", r.ID, reason), map[string]string{"state": string(store.StateFailed)})
		return nil
	}
	e.mu.Lock()
	e.launch(r.ID, c.Step, r.State == store.StatePaused)
	e.mu.Unlock()
	e.emit(r.ID, slog.LevelInfo, "state", "", fmt.Sprintf("resumed after restart at step %d", c.Step+1), nil)
	return nil
}

// cursor is what the store keeps of a run's progress: the step in progress
// and a fingerprint of the plan that step belongs to.
type cursor struct {
	Step int    `json:"step"`
	Plan string `json:"plan,omitempty"`
}

// planPrint fingerprints a plan (mode and every step), so that a resume can
// tell whether the configuration still describes the same procedure.
func planPrint(mode string, steps []Step) string {
	h := sha256.New()
	fmt.Fprintln(h, mode)
	for _, s := range steps {
		fmt.Fprintf(h, "%s|%d|%s|%s|%d|%.9g|%t\n", s.Kind, s.Cycle, s.Direction, s.PointKind, s.Index, s.TargetPa, s.TopHold)
	}
	return hex.EncodeToString(h.Sum(nil)[:12])
}
