package acquire

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"sync/atomic"
	"time"

	"plateau/acquire/store"
)

// lifecycle is the one owner of run state: every change is written to the
// store and to memory together, under one lock that only state changes
// take. Readers (status, the sample path) take a snapshot and never wait
// for a state write.
type lifecycle struct {
	st  Store
	log *slog.Logger

	mu  sync.Mutex // serialises state changes
	cur atomic.Pointer[activeRun]
	// view is the progress readers see; replaced whole on every change.
	view atomic.Pointer[runView]
	// last is the most recent run that ended in this process.
	last atomic.Pointer[runView]
}

// activeRun is the run the engine is executing.
type activeRun struct {
	id     store.RunID
	cancel context.CancelCauseFunc
	done   chan struct{}
	gate   *gate
	final  store.State
	reason string
}

// runView is what status shows of a run.
type runView struct {
	ID     store.RunID
	State  store.State
	Reason string
	Step   int
	Points int
	Target float64
	Phase  string
	Since  time.Time // when the run entered State (the pause time while paused)
	// StepSince is when the current step began (clock time); Timed counts
	// the steps finished in this process, which took TimedFor against a
	// plan of TimedPlan: the estimate of what is left scales the plan by it.
	StepSince           time.Time
	Timed               int
	TimedFor, TimedPlan time.Duration
	// Held: paused with the source at its setpoint (see Status.Held).
	Held bool
}

func (l *lifecycle) active() *activeRun { return l.cur.Load() }

func (l *lifecycle) snapshot() (runView, bool) {
	if v := l.view.Load(); v != nil {
		return *v, true
	}
	return runView{}, false
}

func (l *lifecycle) update(f func(*runView)) {
	for {
		old := l.view.Load()
		if old == nil {
			return
		}
		v := *old
		f(&v)
		if l.view.CompareAndSwap(old, &v) {
			return
		}
	}
}

// setState writes a state change to the store, retrying a failed write a
// few times, and then to memory. The memory view changes even when the
// store refuses: status must tell the truth about the bench, and the
// caller ends the run safely on the returned error.
func (l *lifecycle) setState(id store.RunID, st store.State, reason string, at time.Time) error {
	l.mu.Lock()
	defer l.mu.Unlock()
	var err error
	for attempt := 0; attempt < 3; attempt++ {
		if _, err = l.st.SetState(id, st, reason); err == nil || errors.Is(err, store.ErrNoRun) {
			break
		}
		time.Sleep(time.Duration(attempt+1) * 50 * time.Millisecond)
	}
	l.update(func(v *runView) {
		if v.ID == id {
			v.State, v.Reason, v.Since, v.Held = st, reason, at, false
		}
	})
	if err != nil {
		l.log.Error("run state not stored", "run", id.String(), "state", string(st), "err", err)
		return fmt.Errorf("store the state %s of run %s: %w", st, id, err)
	}
	return nil
}

// begin makes r the active run.
func (l *lifecycle) begin(r *activeRun, v runView) {
	l.view.Store(&v)
	l.cur.Store(r)
}

// end clears the active run, keeping its last view.
func (l *lifecycle) end(r *activeRun) {
	if v := l.view.Load(); v != nil && v.ID == r.id {
		last := *v
		last.State, last.Reason = r.final, r.reason
		l.last.Store(&last)
	}
	l.cur.CompareAndSwap(r, nil)
	l.view.Store(nil)
}

// gate holds the procedure while a run is paused.
type gate struct {
	mu     sync.Mutex
	paused bool
	why    string
	resume chan struct{} // closed when the run goes on
}

func newGate(paused bool, why string) *gate {
	return &gate{paused: paused, why: why, resume: make(chan struct{})}
}

func (g *gate) Paused() bool {
	g.mu.Lock()
	defer g.mu.Unlock()
	return g.paused
}

// Wait returns once the run is not paused, or ctx ends.
func (g *gate) Wait(ctx context.Context) error {
	for {
		g.mu.Lock()
		paused, ch := g.paused, g.resume
		g.mu.Unlock()
		if !paused {
			return ctx.Err()
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-ch:
		}
	}
}

// set pauses or resumes; it reports whether anything changed.
func (g *gate) set(paused bool, why string) bool {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.paused == paused {
		return false
	}
	g.paused, g.why = paused, why
	if !paused {
		close(g.resume)
		g.resume = make(chan struct{})
	}
	return true
}

// cursor is what the store keeps of a run's progress: the step in progress,
// a fingerprint of the plan that step belongs to and of the instruments.
type cursor struct {
	Step     int    `json:"step"`
	Plan     string `json:"plan,omitempty"`
	Identity string `json:"identity,omitempty"`
}

func decodeCursor(r store.Run) (cursor, error) {
	var c cursor
	if len(r.Cursor) > 0 {
		if err := json.Unmarshal(r.Cursor, &c); err != nil {
			return c, fmt.Errorf("run %s: cursor: %w", r.ID, err)
		}
	}
	return c, nil
}
