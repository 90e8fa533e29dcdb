package drivers

import (
	"context"
	"errors"
	"io"
	"sync"
	"time"
)

// Bus gives one line (an RTU port, a TCP connection, a serial port) one
// owner: requests run one at a time, each on its caller's goroutine while it
// holds the line, in the order they asked, with a quiet pause after each.
// Urgent requests (a vent) go ahead of every ordinary one still waiting. The
// Modbus library keeps unit id and encoding as client-wide state, so the
// client may only be touched while holding the line.
//
// A request whose context has ended never starts: Acquire checks before it
// queues and again once it holds the line, so a setpoint queued behind a
// slow read cannot reach the wire after its context was cancelled (by a vent,
// a pause or shutdown). Running the request on the caller's goroutine, rather
// than handing it to a goroutine of the bus, saves two goroutine switches and
// a channel per request; ownership is the same since only the holder touches
// the line.
//
// The pause is wall time on purpose: it is there for the physical line (a
// device releasing the RS-485 bus) and a faster simulation clock does not
// make the wire faster.
type Bus struct {
	pause time.Duration

	mu             sync.Mutex
	busy           bool
	closed         bool
	urgent, normal []*waiter
	idle           chan struct{} // Close waits on it for the holder to finish
	quit           chan struct{} // closed by Close: ends a wait for the pause

	quietUntil time.Time // end of the pause after the last request; only the holder touches it
}

// waiter is a request waiting for the line. ok is set, under the bus's
// lock, before ch is closed: true when the line is handed over, false when
// the bus closed.
type waiter struct {
	ch chan struct{}
	ok bool
}

// ErrBusClosed is returned by Do after Close.
var ErrBusClosed = errors.New("bus closed")

// NewBus makes the owner of one line. pause is the quiet time after each
// request (zero for none).
func NewBus(pause time.Duration) *Bus {
	return &Bus{pause: pause, quit: make(chan struct{})}
}

// Do runs fn while holding the line and returns its error. When ctx ends
// before fn starts, fn never runs and Do returns ctx's error. Once started, fn
// runs to the end (its own time-out bounds it).
func (b *Bus) Do(ctx context.Context, fn func() error) error {
	if err := b.Acquire(ctx); err != nil {
		return err
	}
	defer b.Release()
	return fn()
}

// Acquire waits its turn for the line, then for the pause after the
// previous request, and returns with the line held, or with ctx's error (or
// ErrBusClosed) and the line not held. It checks ctx before queueing and
// again once the line is won, so work whose context has ended never starts.
// Every successful Acquire must be followed by one Release.
func (b *Bus) Acquire(ctx context.Context) error { return b.acquire(ctx, false) }

// AcquireUrgent is Acquire for a request that must not wait behind ordinary
// ones (venting): it is served before every ordinary request still waiting,
// after the one on the wire.
func (b *Bus) AcquireUrgent(ctx context.Context) error { return b.acquire(ctx, true) }

func (b *Bus) acquire(ctx context.Context, urgent bool) error {
	if err := ctx.Err(); err != nil { // before queueing
		return err
	}
	b.mu.Lock()
	switch {
	case b.closed:
		b.mu.Unlock()
		return ErrBusClosed
	case !b.busy:
		b.busy = true
		b.mu.Unlock()
	default:
		w := &waiter{ch: make(chan struct{})}
		if urgent {
			b.urgent = append(b.urgent, w)
		} else {
			b.normal = append(b.normal, w)
		}
		b.mu.Unlock()
		select {
		case <-w.ch:
			if !w.ok {
				return ErrBusClosed
			}
		case <-ctx.Done():
			b.mu.Lock()
			queued := b.dequeue(w)
			b.mu.Unlock()
			if !queued { // handed the line (or closed) just as ctx ended
				<-w.ch
				if w.ok {
					b.handOff()
				}
			}
			return ctx.Err()
		}
	}
	// Holding the line. It may have been won just as ctx ended or the bus
	// closed: check both again before the wire.
	err := b.waitQuiet(ctx)
	if err == nil {
		err = ctx.Err()
	}
	if err != nil {
		b.handOff()
	}
	return err
}

// dequeue removes w from its queue and reports whether it was still there.
func (b *Bus) dequeue(w *waiter) bool {
	for _, q := range []*[]*waiter{&b.urgent, &b.normal} {
		for i, x := range *q {
			if x == w {
				*q = append((*q)[:i], (*q)[i+1:]...)
				return true
			}
		}
	}
	return false
}

// Release ends the request that holds the line, starts its pause and hands
// the line to the next waiting request.
func (b *Bus) Release() {
	if b.pause > 0 {
		b.quietUntil = time.Now().Add(b.pause)
	}
	b.handOff()
}

// handOff passes the held line to the next waiter, urgent ones first, or
// frees it.
func (b *Bus) handOff() {
	b.mu.Lock()
	defer b.mu.Unlock()
	if !b.closed {
		for _, q := range []*[]*waiter{&b.urgent, &b.normal} {
			if len(*q) > 0 {
				w := (*q)[0]
				*q = (*q)[1:]
				w.ok = true
				close(w.ch)
				return
			}
		}
	}
	b.busy = false
	if b.idle != nil {
		close(b.idle)
		b.idle = nil
	}
}

// waitQuiet waits out the pause after the previous request.
func (b *Bus) waitQuiet(ctx context.Context) error {
	if b.pause <= 0 {
		return nil
	}
	left := time.Until(b.quietUntil)
	if left <= 0 {
		return nil
	}
	t := time.NewTimer(left)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	case <-b.quit:
		return ErrBusClosed
	}
}

// Close makes every waiting and later request fail with ErrBusClosed and
// waits for the running request, if any, to finish.
func (b *Bus) Close() error {
	b.mu.Lock()
	if b.closed {
		b.mu.Unlock()
		return nil
	}
	b.closed = true
	close(b.quit)
	for _, w := range append(b.urgent, b.normal...) {
		close(w.ch) // ok stays false
	}
	b.urgent, b.normal = nil, nil
	var idle chan struct{}
	if b.busy {
		idle = make(chan struct{})
		b.idle = idle
	}
	b.mu.Unlock()
	if idle != nil {
		<-idle
	}
	return nil
}

// Shared hands out one value per key — one bus per port — made on first use
// and closed when the last user releases it. Instruments that name the same
// port therefore share one connection and one goroutine.
type Shared[T io.Closer] struct {
	mu sync.Mutex
	m  map[string]*sharedEntry[T]
}

type sharedEntry[T io.Closer] struct {
	v     T
	users int
}

// Acquire returns the value for key, calling make when there is none yet.
// The release function must be called once when the user is done.
func (s *Shared[T]) Acquire(key string, make func() (T, error)) (T, func() error, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.m == nil {
		s.m = map[string]*sharedEntry[T]{}
	}
	e, ok := s.m[key]
	if !ok {
		v, err := make()
		if err != nil {
			var zero T
			return zero, nil, err
		}
		e = &sharedEntry[T]{v: v}
		s.m[key] = e
	}
	e.users++
	var once sync.Once
	release := func() error {
		var err error
		once.Do(func() {
			s.mu.Lock()
			defer s.mu.Unlock()
			e.users--
			if e.users == 0 {
				delete(s.m, key)
				err = e.v.Close()
			}
		})
		return err
	}
	return e.v, release, nil
}

// Users reports how many users hold key (for tests and status).
func (s *Shared[T]) Users(key string) int {
	s.mu.Lock()
	defer s.mu.Unlock()
	if e, ok := s.m[key]; ok {
		return e.users
	}
	return 0
}
