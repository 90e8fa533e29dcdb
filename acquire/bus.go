package acquire

import (
	"sync"

	"plateau/acquire/store"
)

// Bus fans committed events out to live viewers. Publishing never waits: a
// viewer whose buffer is full is dropped and its channel closed, so it can
// reconnect from the last id it saw and fetch the gap from the store. The
// data itself is never lossy — every event is in the store before it is
// published.
type Bus struct {
	mu   sync.Mutex
	subs map[*Subscription]struct{}
}

// Subscription is one viewer's feed.
type Subscription struct {
	C    chan store.Event
	bus  *Bus
	once sync.Once
}

// NewBus returns an empty bus.
func NewBus() *Bus { return &Bus{subs: map[*Subscription]struct{}{}} }

// Subscribe returns a feed of events published from now on, buffered by buf.
func (b *Bus) Subscribe(buf int) *Subscription {
	if buf < 1 {
		buf = 256
	}
	s := &Subscription{C: make(chan store.Event, buf), bus: b}
	b.mu.Lock()
	b.subs[s] = struct{}{}
	b.mu.Unlock()
	return s
}

// Close ends the subscription.
func (s *Subscription) Close() {
	s.bus.mu.Lock()
	defer s.bus.mu.Unlock()
	s.closeLocked()
}

func (s *Subscription) closeLocked() {
	s.once.Do(func() {
		delete(s.bus.subs, s)
		close(s.C)
	})
}

// Publish hands e to every viewer without blocking.
func (b *Bus) Publish(e store.Event) {
	b.mu.Lock()
	defer b.mu.Unlock()
	for s := range b.subs {
		select {
		case s.C <- e:
		default:
			s.closeLocked() // too slow: drop it; it resumes from its last id
		}
	}
}
