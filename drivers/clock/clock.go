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

// Wall is the real clock.
type Wall struct{}

func (Wall) Now() time.Time                         { return time.Now() }
func (Wall) After(d time.Duration) <-chan time.Time { return time.After(d) }

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
