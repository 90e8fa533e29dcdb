// Package safety is the guard between the reference standard and the
// pressure source. It sees every reference reading first, on the reference
// poller's goroutine, and never waits for storage, events or viewers. It
// trips on a reading above the safety limit, on the reference reporting
// over-range, on a value that is not a finite number, and on the reference
// giving no good reading for a while as long as the source is driven. On a
// trip it latches — the source refuses every further setpoint until a
// person clears the latch — and vents the source at once, on a goroutine of
// its own, so the poller is never held up by the vent.
package safety

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"plateau/drivers"
	"plateau/drivers/clock"
)

// Source is the pressure controller the guard protects.
type Source interface {
	SetPoint(ctx context.Context, pa float64) error
	Vent(ctx context.Context) error
}

// ErrTripped is returned by a setpoint refused while the guard is tripped.
var ErrTripped = errors.New("safety guard tripped: no setpoint until a person resumes")

// Trip says why the guard tripped.
type Trip struct {
	Time   time.Time
	Reason string
}

// Options configure a guard.
type Options struct {
	// Limit is the highest pressure the reference may read (Pa); NaN or
	// 0 with LimitSet false means no limit (no device range yet).
	Limit    float64
	LimitSet bool
	// Silence is how long the reference may give no good reading while
	// the source is driven before the guard trips. It is wall time, like
	// the link's own time-outs: a faster simulated clock does not make the
	// wire faster.
	Silence time.Duration
	Clock   clock.Clock
	Log     *slog.Logger
	// Format prints a pressure for messages.
	Format func(pa float64) string
	// VentTimeout bounds one vent command (default 2 s); the guard sends
	// it again until it succeeds.
	VentTimeout time.Duration
	// OnTrip is told of every trip, on a goroutine of its own (never the
	// poller's), while the vent is under way; it may take its time.
	OnTrip func(Trip)
	// OnVent is told how the vent after a trip went: nil once the source
	// confirmed it, or the first error (the guard keeps sending it). It runs
	// on a goroutine of its own, like OnTrip: reporting never holds a vent.
	OnVent func(error)
	// LoopHigh is the loop current above which an out-of-range reference
	// means over-pressure (mA); 0 turns that check off.
	LoopHigh float64
}

// Guard watches the reference and owns the trip latch and the vent.
type Guard struct {
	opt Options
	src Source // nil without a pressure source

	tripped atomic.Bool
	driven  atomic.Bool  // a setpoint was sent since the last vent
	lastOK  atomic.Int64 // wall time (unix ns) of the last good reference reading
	over    atomic.Bool  // the reference is above the limit now (one alarm per excursion)

	mu     sync.Mutex
	trip   Trip
	cancel context.CancelFunc // cancels setpoints in flight when the guard trips
	ctx    context.Context

	wake chan struct{} // tells the guard goroutine to vent and report
}

// New makes a guard for src (nil when the pressure is set by hand).
func New(src Source, opt Options) *Guard {
	if opt.Clock == nil {
		opt.Clock = clock.Wall{}
	}
	if opt.Log == nil {
		opt.Log = slog.New(slog.DiscardHandler)
	}
	if opt.Format == nil {
		opt.Format = func(pa float64) string { return fmt.Sprintf("%.1f Pa", pa) }
	}
	if opt.VentTimeout <= 0 {
		opt.VentTimeout = 2 * time.Second
	}
	g := &Guard{opt: opt, src: src, wake: make(chan struct{}, 1)}
	g.ctx, g.cancel = context.WithCancel(context.Background())
	g.lastOK.Store(time.Now().UnixNano())
	return g
}

// Observe checks one reference reading. It runs on the reference poller for
// every reading, good or failed, and returns at once.
func (g *Guard) Observe(r drivers.Reading, err error) {
	var reason string
	switch {
	case err == nil && (math.IsNaN(r.Pa) || math.IsInf(r.Pa, 0)):
		reason = "the reference gave a value that is not a finite number"
	case err == nil && g.opt.LimitSet && r.Pa > g.opt.Limit:
		if g.over.Swap(true) {
			return // this excursion has tripped already
		}
		reason = fmt.Sprintf("over-pressure: reference reads %s, above the safety limit %s", g.opt.Format(r.Pa), g.opt.Format(g.opt.Limit))
	case err != nil && drivers.KindOf(err) == drivers.KindOverload:
		reason = fmt.Sprintf("over-pressure: the reference reports over-range (%v)", err)
	case err != nil && drivers.KindOf(err) == drivers.KindOutOfRange && g.opt.LoopHigh > 0 && r.Raw > g.opt.LoopHigh:
		reason = fmt.Sprintf("over-pressure: the reference's loop current is above its range (%v)", err)
	case err == nil:
		g.over.Store(false)
		g.lastOK.Store(time.Now().UnixNano())
		return
	default:
		return // a failed read: the silence watch counts it
	}
	g.Trip(reason)
}

// Trip latches the guard, stops setpoints in flight and wakes the vent.
// Safe from any goroutine; never waits. A trip while tripped keeps the
// first reason.
func (g *Guard) Trip(reason string) {
	if g.tripped.Swap(true) {
		return
	}
	g.mu.Lock()
	g.trip = Trip{Time: g.opt.Clock.Now(), Reason: reason}
	g.cancel()
	g.mu.Unlock()
	select {
	case g.wake <- struct{}{}:
	default:
	}
}

// Tripped returns the trip while the guard is latched.
func (g *Guard) Tripped() (Trip, bool) {
	if !g.tripped.Load() {
		return Trip{}, false
	}
	g.mu.Lock()
	defer g.mu.Unlock()
	return g.trip, true
}

// Clear releases the latch: a person has looked and resumes or starts a run.
func (g *Guard) Clear() {
	g.mu.Lock()
	defer g.mu.Unlock()
	if !g.tripped.Load() {
		return
	}
	g.ctx, g.cancel = context.WithCancel(context.Background())
	g.trip = Trip{}
	g.lastOK.Store(time.Now().UnixNano())
	g.over.Store(false) // a reading still above the limit trips again
	g.tripped.Store(false)
}

// Run vents on every trip and watches for a silent reference, until ctx
// ends. The silence check looks every tick of wall time.
func (g *Guard) Run(ctx context.Context, tick time.Duration) {
	if tick <= 0 || tick > time.Second {
		tick = time.Second
	}
	t := time.NewTicker(tick)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-g.wake:
			g.handleTrip(ctx)
		case <-t.C:
			g.checkSilence()
		}
	}
}

func (g *Guard) checkSilence() {
	if g.opt.Silence <= 0 || !g.driven.Load() || g.tripped.Load() {
		return
	}
	quiet := time.Since(time.Unix(0, g.lastOK.Load()))
	if quiet > g.opt.Silence {
		g.Trip(fmt.Sprintf("the reference gave no good reading for %s while the source was driven", quiet.Round(time.Millisecond)))
	}
}

// handleTrip reports the trip at once (the run is paused and people are
// told why while the vent is on its way), then vents until the source
// confirms it or ctx ends, and reports how the vent went.
func (g *Guard) handleTrip(ctx context.Context) {
	t, ok := g.Tripped()
	if !ok {
		return
	}
	if g.opt.OnTrip != nil {
		go g.opt.OnTrip(t)
	}
	if g.src == nil {
		return
	}
	wait := 100 * time.Millisecond
	for attempt := 1; ; attempt++ {
		// The vent must go out even when the daemon is shutting down.
		vctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), g.opt.VentTimeout)
		err := g.src.Vent(vctx)
		cancel()
		if err == nil {
			g.driven.Store(false)
			if g.opt.OnVent != nil {
				go g.opt.OnVent(nil) // reporting never holds the guard
			}
			return
		}
		g.opt.Log.Error("vent after a safety trip failed: sending it again; vent by hand if this goes on", "attempt", attempt, "err", err)
		if attempt == 1 && g.opt.OnVent != nil {
			go g.opt.OnVent(err) // never hold the next attempt on the event log
		}
		select {
		case <-ctx.Done():
			return
		case <-time.After(wait):
		}
		wait = min(2*wait, 5*time.Second)
	}
}

// Source returns the pressure source as the procedure must use it: every
// setpoint is refused while the guard is tripped, and one already on its
// way is cancelled by a trip before it reaches the wire.
func (g *Guard) Source() Source {
	if g.src == nil {
		return nil
	}
	return latched{g}
}

type latched struct{ g *Guard }

func (l latched) SetPoint(ctx context.Context, pa float64) error {
	g := l.g
	if g.opt.LimitSet && pa > g.opt.Limit {
		return fmt.Errorf("setpoint %s refused: above the safety limit %s", g.opt.Format(pa), g.opt.Format(g.opt.Limit))
	}
	g.mu.Lock()
	tripCtx := g.ctx
	g.mu.Unlock()
	if g.tripped.Load() {
		return ErrTripped
	}
	// A setpoint needs a reference that is answering: never raise the
	// pressure blind.
	if quiet := time.Since(time.Unix(0, g.lastOK.Load())); g.opt.Silence > 0 && quiet > g.opt.Silence {
		g.Trip(fmt.Sprintf("the reference gave no good reading for %s when a setpoint was due", quiet.Round(time.Millisecond)))
		return ErrTripped
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	stop := context.AfterFunc(tripCtx, cancel)
	defer stop()
	g.driven.Store(true)
	if err := g.src.SetPoint(ctx, pa); err != nil {
		if g.tripped.Load() {
			return ErrTripped
		}
		return err
	}
	if g.tripped.Load() {
		return ErrTripped
	}
	return nil
}

func (l latched) Vent(ctx context.Context) error {
	if err := l.g.src.Vent(ctx); err != nil {
		return err
	}
	l.g.driven.Store(false)
	return nil
}
