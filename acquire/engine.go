// Package acquire runs a calibration bench: it wires the opened instruments
// to their pollers, the reference to the safety guard, the samples to the
// store, and runs the procedure of at most one run at a time, owning that
// run's state in memory and in the store together.
//
//	reference poller ──► safety guard (first, never waits) ──► latch + vent
//	      │                   └─ trips pause the run
//	      ├──► sample hand-off (never waits) ──► recorder goroutine ──► store
//	      └──► settle detector ──► procedure ──► points (committed after their samples)
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

	"plateau/acquire/poll"
	"plateau/acquire/procedure"
	"plateau/acquire/safety"
	"plateau/acquire/settle"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/readout"
	"plateau/analysis/units"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
)

// Instrument is one opened instrument handed to the engine. Whoever opened
// it closes it.
type Instrument struct {
	Name  string
	Gauge drivers.Gauge
	Poll  time.Duration
	// ByPerson: the device is read by a person (an analog dial), once per
	// point, instead of being polled.
	ByPerson bool
	// ResolutionPa is a device's resolution: its settle rule allows a
	// flicker of one digit.
	ResolutionPa float64
}

// Instruments are the opened instruments of a bench.
type Instruments struct {
	Reference Instrument
	Devices   []Instrument   // the devices under test, compared with the reference together
	Others    []Instrument   // recorded only (ambient sensors)
	Source    drivers.Source // nil when a person sets the pressure
}

// Store is what the engine keeps its record in.
type Store interface {
	// CreateSoleRun refuses while any run is unfinished.
	CreateSoleRun(label string, config, record []byte) (store.Run, error)
	SetState(id store.RunID, state store.State, reason string) (store.Run, error)
	SetCursor(id store.RunID, cursor []byte) (store.Run, error)
	Unfinished() ([]store.Run, error)
	Points(run store.RunID) ([]analysis.Point, error)
	AddPoint(run store.RunID, p analysis.Point) (seq uint64, existed bool, err error)
	AddEvent(e store.Event) (uint64, error)
	// Put queues a sample for the next batched commit; it may wait when
	// the store's own queue is full (never on a poller: the recorder calls it).
	Put(run store.RunID, instrument string, smp store.Sample) error
	// Flush returns once everything queued before it is committed.
	Flush() error
	WriterStatus() store.WriterStatus
}

var _ Store = (*store.Store)(nil)

// Options wire an engine together.
type Options struct {
	Config      *config.Config
	ConfigYAML  []byte // the configuration as used, kept with each run
	Record      []byte // the frozen record of a new run (config/record)
	Identity    string // fingerprint of the device and reference identities
	Instruments Instruments
	Store       Store
	Clock       clock.Clock
	Log         *slog.Logger
	// SampleBuffer is how many samples may wait for the store before the
	// store counts as unable to keep up (default 65536).
	SampleBuffer int
}

// Engine owns the pollers, the safety guard, the sample recorder and at
// most one active run.
type Engine struct {
	emitMu   sync.Mutex // orders events: time stamp and store id together (emit)
	cfg      *config.Config
	yaml     []byte
	record   []byte
	identity string
	st       Store
	clk      clock.Clock
	log      *slog.Logger
	bus      *Bus
	steps    []procedure.Step
	plan     string // fingerprint of the plan, kept in each run's cursor

	ref    *poll.Poller
	devs   []*device
	others []*poll.Poller
	source drivers.Source
	guard  *safety.Guard

	samples *recorder
	ambient *ambientBook // the ambient instruments' recent readings (ambient.go)
	runs    lifecycle

	committedPoints atomic.Uint64
	storeFault      atomic.Pointer[string] // why the store cannot write, nil when it can
	faultAt         atomic.Int64           // wall time (unix ns) the fault was seen

	serveCtx context.Context
	ready    chan struct{} // closed once Serve has resumed any unfinished run
	started  atomic.Bool
}

// device is one device under test on the bench.
type device struct {
	poll     *poll.Poller
	label    string // names its points when the run has several devices
	byPerson bool   // read by a person, once per point
	enterer  Enterer
}

// readByPerson says whether p is a device read by a person (no poll loop).
func (e *Engine) readByPerson(p *poll.Poller) bool {
	for _, d := range e.devs {
		if d.poll == p {
			return d.byPerson
		}
	}
	return false
}

// Enterer takes an operator's reading of an analog dial.
type Enterer interface {
	Enter(value float64, unit string, at time.Time) error
}

// New wires an engine around opened instruments.
func New(opt Options) (*Engine, error) {
	if opt.Config == nil || opt.Store == nil {
		return nil, errors.New("engine: config and store are required")
	}
	in := opt.Instruments
	if in.Reference.Gauge == nil || len(in.Devices) == 0 {
		return nil, errors.New("engine: a reference and a device under test are required")
	}
	if len(in.Devices) > 1 && procedure.Compare(opt.Config.Procedure.Compare) == procedure.SetByDevice {
		return nil, errors.New("engine: set-by-device brings one pointer onto its mark: it works with one device under test, not several; use set-by-reference")
	}
	if opt.Clock == nil {
		opt.Clock = clock.Wall{}
	}
	if opt.Log == nil {
		opt.Log = slog.New(slog.DiscardHandler)
	}
	if opt.SampleBuffer <= 0 {
		opt.SampleBuffer = 1 << 16
	}
	cfg := opt.Config
	amb := newAmbientBook(cfg, in.Others, opt.Clock)
	in = amb.convert(in) // a reference or controller of another mode goes through the barometer
	e := &Engine{cfg: cfg, ambient: amb, yaml: opt.ConfigYAML, record: opt.Record, identity: opt.Identity, st: opt.Store,
		clk: opt.Clock, log: opt.Log, bus: NewBus(), source: in.Source,
		ready: make(chan struct{})}
	if procedure.Mode(cfg.Procedure.Mode) == procedure.Planned {
		e.steps = procedure.Plan(cfg.Procedure, cfg.Device.LowerPa)
	}
	e.plan = planPrint(cfg.Procedure.Mode, e.steps)
	e.samples = newRecorder(opt.Store, opt.SampleBuffer, e.storeTrouble)
	e.runs.st, e.runs.log = opt.Store, opt.Log

	silence := cfg.Safety.Silence
	if silence <= 0 {
		silence = defaultSilence(cfg, in.Reference.Name)
	}
	e.guard = safety.New(in.Source, safety.Options{
		Limit: cfg.Safety.MaxPressurePa, LimitSet: cfg.Safety.Set, Silence: silence,
		Clock: opt.Clock, Log: opt.Log.With("component", "safety"), Format: e.fmtPa,
		LoopHigh: drivers.LoopValidHigh, OnTrip: e.tripped, OnVent: e.ventedAfterTrip,
	})

	rules := settleRules(cfg)
	mk := func(inst Instrument, r settle.Rules, first poll.Observer) (*poll.Poller, error) {
		p, err := poll.New(poll.Options{Name: inst.Name, Gauge: inst.Gauge, Interval: inst.Poll, Rules: r, Clock: opt.Clock,
			Sink: e.samples, First: first, Log: opt.Log.With("instrument", inst.Name), Link: e.linkChanged,
			ClockBack: e.clockStepped})
		if err != nil {
			return nil, fmt.Errorf("instrument %q: %w", inst.Name, err)
		}
		return p, nil
	}
	var err error
	if e.ref, err = mk(in.Reference, rules, e.guard.Observe); err != nil {
		return nil, err
	}
	for _, d := range in.Devices {
		res := d.ResolutionPa
		if res == 0 {
			res = cfg.Device.ResolutionPa
		}
		p, err := mk(d, deviceRules(rules, res), nil)
		if err != nil {
			return nil, err
		}
		dv := &device{poll: p, byPerson: d.ByPerson}
		if len(in.Devices) > 1 {
			dv.label = d.Name // several devices: each point names its device
		}
		if m, ok := d.Gauge.(Enterer); ok {
			dv.enterer = m
		}
		e.devs = append(e.devs, dv)
	}
	for _, o := range in.Others {
		if o.ByPerson {
			continue // entered by an operator (ambient.go), not polled
		}
		p, err := mk(o, rules, amb.observer(o.Name)) // observed, never guarded
		if err != nil {
			return nil, err
		}
		e.others = append(e.others, p)
	}
	return e, nil
}

// defaultSilence is how long the reference may stay without a good reading
// while the source is driven: three poll cycles, each as long as a read that
// times out after all its retries may take (common practice: a few missed
// readings, never a blind rise).
func defaultSilence(cfg *config.Config, reference string) time.Duration {
	for _, in := range cfg.Instruments {
		if in.Name == reference {
			return 3 * max(in.Poll, in.Link.Timeout*time.Duration(in.Link.Retries+1), 700*time.Millisecond)
		}
	}
	return 5 * time.Second
}

func settleRules(cfg *config.Config) settle.Rules {
	s := cfg.Procedure.Settle
	return settle.Rules{
		Window: s.Window, MinSamples: s.MinCount,
		MaxDrift: s.MaxDriftPaPerS, MaxSpread: s.MaxSpreadPa, Band: s.BandPa,
		Show: showOf(cfg.Device),
	}
}

// showOf is how people read pressures of this bench: the device's unit,
// with the digits its resolution supports (pascal when it has no unit).
func showOf(d config.Device) settle.Display {
	u, err := units.Lookup(d.Unit)
	if err != nil {
		u = units.Pascal
	}
	return settle.Display{Unit: u, ResolutionPa: d.ResolutionPa}
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

// Ready is closed once Serve polls and has resumed any unfinished run.
func (e *Engine) Ready() <-chan struct{} { return e.ready }

// Bus is the live event feed.
func (e *Engine) Bus() *Bus { return e.bus }

// Close does nothing the caller must wait for: instruments are closed by
// whoever opened them. It is kept so that callers can defer it.
func (e *Engine) Close() error { return nil }

// Serve polls every instrument, watches the store and resumes an
// unfinished run, until ctx ends. On return the pollers have stopped and
// any active run is left resumable in the store.
func (e *Engine) Serve(ctx context.Context) error {
	if e.started.Swap(true) {
		return errors.New("engine: already serving")
	}
	e.serveCtx = ctx
	var wg sync.WaitGroup
	spawn := func(f func()) {
		wg.Add(1)
		go func() { defer wg.Done(); f() }()
	}
	spawn(e.samples.loop)
	spawn(func() { e.guard.Run(ctx, e.tick()) })
	spawn(func() { e.watchStore(ctx) })
	for _, p := range e.pollers() {
		if e.readByPerson(p) {
			continue // read once per point, not polled
		}
		spawn(func() { p.Run(ctx) })
	}
	if err := e.resumeUnfinished(); err != nil {
		e.emit(0, slog.LevelError, "resume", "", fmt.Sprintf("could not resume the unfinished run: %v", err), nil)
	}
	close(e.ready)
	<-ctx.Done()
	if r := e.runs.active(); r != nil {
		<-r.done // the procedure notices ctx and leaves the run as it is
	}
	e.samples.close()
	wg.Wait()
	return nil
}

func (e *Engine) pollers() []*poll.Poller {
	out := []*poll.Poller{e.ref}
	for _, d := range e.devs {
		out = append(out, d.poll)
	}
	return append(out, e.others...)
}

// tick is how often the procedure looks at the detectors.
func (e *Engine) tick() time.Duration {
	t := e.ref.Interval()
	for _, d := range e.devs {
		t = min(t, d.poll.Interval())
	}
	return t
}

// emit commits an event to the store, then publishes it. An event the
// store cannot take is still published, without an id (it is not in the
// record), so that people watching learn why the run stopped.
func (e *Engine) emit(run store.RunID, level slog.Level, typ, instrument, msg string, data any) {
	ev := store.Event{Run: run, Level: level, Instrument: instrument, Type: typ, Message: msg}
	if data != nil {
		if b, err := json.Marshal(data); err == nil {
			ev.Data = b
		}
	}
	e.log.Log(context.Background(), level, msg, "type", typ, "instrument", instrument, "run", run.String())
	// Stamped and stored under one lock, so that the log's order (its ids)
	// is the order of its times even when several goroutines report at once.
	e.emitMu.Lock()
	defer e.emitMu.Unlock()
	ev.Time = e.clk.Now()
	if e.storeFault.Load() == nil {
		id, err := e.st.AddEvent(ev)
		if err == nil {
			ev.ID = id
			e.bus.Publish(ev)
			return
		}
		e.log.Error("event not stored", "err", err)
	}
	e.bus.Publish(ev)
}

// linkChanged turns a link going down or coming back into an event.
func (e *Engine) linkChanged(name string, down bool, err error) {
	run := store.RunID(0)
	if r := e.runs.active(); r != nil {
		run = r.id
	}
	if down {
		go e.emit(run, slog.LevelWarn, "link", name, fmt.Sprintf("%s: link lost (%v)", name, err), map[string]bool{"up": false})
		return
	}
	go e.emit(run, slog.LevelInfo, "link", name, name+": link restored", map[string]bool{"up": true})
}

// clockStepped reports a clock that stepped back; the instrument's window
// started afresh, so no point pairs readings from both sides of the step.
func (e *Engine) clockStepped(name string, by time.Duration) {
	run := store.RunID(0)
	if r := e.runs.active(); r != nil {
		run = r.id
	}
	go e.emit(run, slog.LevelWarn, "clock", name, fmt.Sprintf("%s: the clock stepped back by %s; readings before the step are not paired with readings after it", name, by), nil)
}

func (e *Engine) fmtPa(pa float64) string {
	show := showOf(e.cfg.Device)
	return readout.WithUnit(pa, show.Unit, show.ResolutionPa)
}

// planPrint fingerprints a plan (mode and every step), so that a resume can
// tell whether the configuration still describes the same procedure.
func planPrint(mode string, steps []procedure.Step) string {
	h := sha256.New()
	fmt.Fprintln(h, mode)
	for _, s := range steps {
		fmt.Fprintf(h, "%s|%d|%s|%s|%d|%.9g|%t\n", s.Kind, s.Cycle, s.Direction, s.PointKind, s.Index, s.TargetPa, s.TopHold)
	}
	return hex.EncodeToString(h.Sum(nil)[:12])
}
