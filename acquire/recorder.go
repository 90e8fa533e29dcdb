package acquire

import (
	"errors"
	"fmt"
	"sync"
	"sync/atomic"
	"time"

	"plateau/acquire/store"
	"plateau/drivers"
)

// recorder takes samples from the pollers without ever making them wait
// and hands them to the store in batches from a goroutine of its own (one
// wake-up per batch, not per sample). When the store falls so far behind
// that the hand-off is full, the samples that do not fit are counted, not
// queued, and the store is reported as unable to keep up: the run is
// paused and vented, so no point is ever captured over samples that were
// not kept.
type recorder struct {
	st      Store
	limit   int // samples the hand-off holds at most
	trouble func(error)

	current atomic.Uint64 // the run samples belong to; 0 when none
	lost    atomic.Uint64 // samples that did not fit the hand-off

	mu      sync.Mutex
	pending []recorderItem
	closed  bool
	wake    chan struct{} // a batch is worth writing now
	done    chan struct{} // the loop has ended

	putMu sync.Mutex     // held while a batch goes to the store, so flushes keep order
	spare []recorderItem // the last batch's array, reused for the next (under putMu)
}

type recorderItem struct {
	run        store.RunID
	instrument string
	sample     store.Sample
}

// recorderBatch is how many waiting samples wake the loop before its tick.
const recorderBatch = 256

func newRecorder(st Store, buffer int, trouble func(error)) *recorder {
	return &recorder{st: st, limit: buffer, trouble: trouble, wake: make(chan struct{}, 1), done: make(chan struct{})}
}

func (r *recorder) setRun(id store.RunID) { r.current.Store(uint64(id)) }

// Sample implements poll.Sink: it never waits for the store.
func (r *recorder) Sample(instrument string, rd drivers.Reading, err error) {
	run := store.RunID(r.current.Load())
	if run == 0 {
		return // readings are stored during runs only
	}
	smp := store.SampleOf(rd, err)
	r.mu.Lock()
	if r.closed {
		r.mu.Unlock()
		return
	}
	if len(r.pending) >= r.limit {
		r.mu.Unlock()
		if r.lost.Add(1) == 1 {
			go r.trouble(fmt.Errorf("the store is not keeping up: %d samples wait for it", r.limit))
		}
		return
	}
	r.pending = append(r.pending, recorderItem{run: run, instrument: instrument, sample: smp})
	n := len(r.pending)
	r.mu.Unlock()
	if n == recorderBatch {
		select {
		case r.wake <- struct{}{}:
		default:
		}
	}
}

// loop writes the waiting samples every tick, or sooner when a batch is
// full, until close.
func (r *recorder) loop() {
	defer close(r.done)
	t := time.NewTicker(50 * time.Millisecond)
	defer t.Stop()
	for {
		select {
		case <-t.C:
		case <-r.wake:
		}
		r.mu.Lock()
		closed := r.closed
		r.mu.Unlock()
		r.putPending()
		if closed {
			return
		}
	}
}

// putPending hands every waiting sample to the store, in order.
func (r *recorder) putPending() {
	r.putMu.Lock()
	defer r.putMu.Unlock()
	next := r.spare
	if next == nil {
		next = make([]recorderItem, 0, recorderBatch)
	}
	r.mu.Lock()
	batch := r.pending
	r.pending = next
	r.mu.Unlock()
	for _, it := range batch {
		// A sample racing the end of its run is refused by the store; it
		// belongs to no run, so that is not a fault.
		if err := r.st.Put(it.run, it.instrument, it.sample); err != nil && !errors.Is(err, store.ErrRunEnded) {
			r.trouble(fmt.Errorf("store a sample of %s: %w", it.instrument, err))
		}
	}
	// Two arrays take turns instead of a new one every tick (20 a second).
	// One grown while the store lagged is let go, not kept for the
	// daemon's lifetime.
	r.spare = nil
	if cap(batch) <= 4*recorderBatch {
		clear(batch)
		r.spare = batch[:0]
	}
}

// flush returns once every sample handed over before it is committed, or
// with the commit error.
func (r *recorder) flush() error {
	if n := r.lost.Load(); n > 0 {
		return fmt.Errorf("%d samples could not be handed to the store", n)
	}
	r.putPending()
	return r.st.Flush()
}

// clearLost forgets the samples lost during a store fault once a person
// resumes: the points captured after that use fresh windows.
func (r *recorder) clearLost() uint64 { return r.lost.Swap(0) }

// close writes what is waiting and stops the loop.
func (r *recorder) close() {
	r.mu.Lock()
	already := r.closed
	r.closed = true
	r.mu.Unlock()
	if already {
		return
	}
	select {
	case r.wake <- struct{}{}:
	default:
	}
	<-r.done
}
