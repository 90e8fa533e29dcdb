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
// holds the line, with a quiet pause after each. The Modbus library keeps unit
// id and encoding as client-wide state, so the client may only be touched
// from inside Do.
//
// A request whose context has ended never starts: Do checks before it
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
	turn  chan struct{} // holds a token while a request owns the line
	quit  chan struct{}
	pause time.Duration
	once  sync.Once

	quietUntil time.Time // end of the pause after the last request; only the holder touches it
}

// ErrBusClosed is returned by Do after Close.
var ErrBusClosed = errors.New("bus closed")

// NewBus makes the owner of one line. pause is the quiet time after each
// request (zero for none).
func NewBus(pause time.Duration) *Bus {
	return &Bus{turn: make(chan struct{}, 1), quit: make(chan struct{}), pause: pause}
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

// Acquire waits for the line, then for the pause after the previous
// request, and returns with the line held, or with ctx's error (or
// ErrBusClosed) and the line not held. It checks ctx before queueing and
// again once the line is won, so work whose context has ended never starts.
// Every successful Acquire must be followed by one Release.
func (b *Bus) Acquire(ctx context.Context) error {
	if err := ctx.Err(); err != nil { // before queueing
		return err
	}
	select {
	case b.turn <- struct{}{}:
	case <-ctx.Done():
		return ctx.Err()
	case <-b.quit:
		return ErrBusClosed
	}
	// select picks at random among ready cases: the line may have been won
	// just as ctx ended or the bus closed. Check both again before the wire.
	err := b.waitQuiet(ctx)
	if err == nil {
		select {
		case <-b.quit:
			err = ErrBusClosed
		default:
			err = ctx.Err()
		}
	}
	if err != nil {
		<-b.turn
	}
	return err
}

// Release ends the request that holds the line and starts its pause.
func (b *Bus) Release() {
	if b.pause > 0 {
		b.quietUntil = time.Now().Add(b.pause)
	}
	<-b.turn
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

// Close makes every later Do fail with ErrBusClosed and waits for the
// running request, if any, to finish.
func (b *Bus) Close() error {
	b.once.Do(func() {
		close(b.quit)
		b.turn <- struct{}{} // wait for the holder; the token is never given back
	})
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
