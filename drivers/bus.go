package drivers

import (
	"context"
	"errors"
	"io"
	"sync"
	"time"
)

// Bus runs the requests of every instrument on one line (an RTU port, a TCP
// gateway) one at a time on a goroutine of its own, with a quiet pause after
// each. The Modbus library keeps unit id and encoding as client-wide state,
// so the client may only be touched from inside Do.
//
// The pause is wall time on purpose: it is there for the physical line (a
// device releasing the RS-485 bus) and a faster simulation clock does not
// make the wire faster.
type Bus struct {
	jobs  chan func()
	quit  chan struct{}
	done  chan struct{}
	pause time.Duration
	once  sync.Once
}

// ErrBusClosed is returned by Do after Close.
var ErrBusClosed = errors.New("bus closed")

// NewBus starts the goroutine that owns a line.
func NewBus(pause time.Duration) *Bus {
	b := &Bus{jobs: make(chan func()), quit: make(chan struct{}), done: make(chan struct{}), pause: pause}
	go b.run()
	return b
}

func (b *Bus) run() {
	defer close(b.done)
	for {
		select {
		case <-b.quit:
			return
		case job := <-b.jobs:
			job()
			if b.pause > 0 {
				select {
				case <-time.After(b.pause):
				case <-b.quit:
					return
				}
			}
		}
	}
}

// Do runs fn on the bus goroutine and returns its error. When ctx ends while
// the request waits for its turn, Do gives up without running it; once
// started, fn runs to the end (its own time-out bounds it) and Do returns
// ctx's error if ctx ended meanwhile.
func (b *Bus) Do(ctx context.Context, fn func() error) error {
	res := make(chan error, 1)
	select {
	case b.jobs <- func() { res <- fn() }:
	case <-ctx.Done():
		return ctx.Err()
	case <-b.quit:
		return ErrBusClosed
	}
	select {
	case err := <-res:
		return err
	case <-ctx.Done():
		return ctx.Err()
	}
}

// Close stops the goroutine after the running request, if any, finishes.
func (b *Bus) Close() error {
	b.once.Do(func() { close(b.quit) })
	<-b.done
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
