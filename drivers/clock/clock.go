// Package clock is the one way time enters plateau's acquisition path. The
// wall clock runs production; a scaled clock runs the demo and accelerated
// tests (a night of cycles in seconds); a manual clock steps unit tests. The
// simulator reads the same clock, so its physics and the engine agree.
package clock

import (
	"sync"
	"time"
)

// Clock tells the time and waits.
type Clock interface {
	Now() time.Time
	// After waits for d of this clock's time.
	After(d time.Duration) <-chan time.Time
}

// Timer is one wait that a loop re-arms on every turn (a poller between
// reads), so that waiting costs no allocation on the clocks that run for
// hours. What C delivers only says the wait is over: read the clock for
// the time.
type Timer interface {
	// C is the channel of the wait armed by the last Reset; call it after
	// every Reset. A stopped or never armed timer's channel never delivers.
	C() <-chan time.Time
	// Reset arms the timer for d of the clock's time, dropping a wait not
	// yet received.
	Reset(d time.Duration)
	Stop()
}

// NewTimer returns a stopped Timer on c: one reused wait on the wall and
// scaled clocks, a fresh After on each Reset on the others (a manual clock
// counts its waits, see Manual.Waiting).
func NewTimer(c Clock) Timer {
	if tc, ok := c.(interface{ newTimer() Timer }); ok {
		return tc.newTimer()
	}
	return &afterTimer{clk: c}
}

type afterTimer struct {
	clk Clock
	ch  <-chan time.Time
}

func (t *afterTimer) C() <-chan time.Time   { return t.ch }
func (t *afterTimer) Reset(d time.Duration) { t.ch = t.clk.After(d) }
func (t *afterTimer) Stop()                 { t.ch = nil }

// wallTimer is a time.Timer waiting scale × the duration asked: since Go
// 1.23 its Reset and Stop leave no stale value in C.
type wallTimer struct {
	t     *time.Timer
	scale float64
}

func newWallTimer(scale float64) *wallTimer {
	t := time.NewTimer(time.Hour)
	t.Stop()
	return &wallTimer{t: t, scale: scale}
}

func (w *wallTimer) C() <-chan time.Time { return w.t.C }
func (w *wallTimer) Reset(d time.Duration) {
	w.t.Reset(time.Duration(float64(d) * w.scale))
}
func (w *wallTimer) Stop() { w.t.Stop() }

// Wall is the real clock.
type Wall struct{}

func (Wall) Now() time.Time                         { return time.Now() }
func (Wall) After(d time.Duration) <-chan time.Time { return time.After(d) }
func (Wall) newTimer() Timer                        { return newWallTimer(1) }

// Scaled runs Factor times faster than the wall clock, starting from the wall
// time when it was made. Real I/O still happens in wall time, so keep the
// factor such that poll intervals stay well above a network round trip.
type Scaled struct {
	Factor float64
	mu     sync.RWMutex
	start  time.Time
	origin time.Time
}

// NewScaled returns a clock that runs factor times faster than real time.
func NewScaled(factor float64) *Scaled {
	if factor <= 0 {
		factor = 1
	}
	now := time.Now()
	return &Scaled{Factor: factor, start: now, origin: now}
}

func (s *Scaled) Now() time.Time {
	s.mu.RLock()
	defer s.mu.RUnlock()
	return s.origin.Add(time.Duration(float64(time.Since(s.start)) * s.Factor))
}

// NotBefore moves the clock forward to t when it shows an earlier time, so
// that a simulated bench restarted on a store written by a faster clock
// never stamps a time before what is stored. It never moves backwards.
func (s *Scaled) NotBefore(t time.Time) {
	s.mu.Lock()
	defer s.mu.Unlock()
	now := s.origin.Add(time.Duration(float64(time.Since(s.start)) * s.Factor))
	if t.After(now) {
		s.origin, s.start = t, time.Now()
	}
}

func (s *Scaled) newTimer() Timer { return newWallTimer(1 / s.Factor) }

func (s *Scaled) After(d time.Duration) <-chan time.Time {
	out := make(chan time.Time, 1)
	time.AfterFunc(time.Duration(float64(d)/s.Factor), func() { out <- s.Now() })
	return out
}

// Manual only moves when told to; for unit tests of pure timing logic.
type Manual struct {
	mu      sync.Mutex
	now     time.Time
	waiters []waiter
}

type waiter struct {
	at time.Time
	ch chan time.Time
}

// NewManual returns a manual clock set to t.
func NewManual(t time.Time) *Manual { return &Manual{now: t} }

func (m *Manual) Now() time.Time {
	m.mu.Lock()
	defer m.mu.Unlock()
	return m.now
}

func (m *Manual) After(d time.Duration) <-chan time.Time {
	m.mu.Lock()
	defer m.mu.Unlock()
	ch := make(chan time.Time, 1)
	at := m.now.Add(d)
	if d <= 0 {
		ch <- m.now
		return ch
	}
	m.waiters = append(m.waiters, waiter{at, ch})
	return ch
}

// Waiting is how many waits are pending. A test moves the clock only once
// the goroutine it steers is waiting; otherwise that goroutine would start
// its wait after the move and miss it.
func (m *Manual) Waiting() int {
	m.mu.Lock()
	defer m.mu.Unlock()
	return len(m.waiters)
}

// Advance moves the clock forward and fires every wait that is due.
func (m *Manual) Advance(d time.Duration) {
	m.mu.Lock()
	m.now = m.now.Add(d)
	now := m.now
	kept := m.waiters[:0]
	var due []waiter
	for _, w := range m.waiters {
		if !w.at.After(now) {
			due = append(due, w)
		} else {
			kept = append(kept, w)
		}
	}
	m.waiters = kept
	m.mu.Unlock()
	for _, w := range due {
		w.ch <- now
	}
}
