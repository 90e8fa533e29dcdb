package acquire

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"sync/atomic"
	"time"

	"plateau/acquire/store"
	"plateau/drivers"
)

// recorder takes samples from the pollers without ever making them wait
// and hands them to the store on a goroutine of its own. When the store
// falls so far behind that the hand-off is full, the samples that do not
// fit are counted, not queued, and the store is reported as unable to keep
// up: the run is paused and vented, so no point is ever captured over
// samples that were not kept.
type recorder struct {
	st      Store
	ch      chan recorderItem
	trouble func(error)

	current atomic.Uint64 // the run samples belong to; 0 when none
	lost    atomic.Uint64 // samples that did not fit the hand-off
	once    sync.Once
	closed  atomic.Bool
	mu      sync.RWMutex // guards ch against close while sending
}

type recorderItem struct {
	run        store.RunID
	instrument string
	sample     store.Sample
	flushed    chan error // a barrier: reply once everything before it is committed
}

func newRecorder(st Store, buffer int, trouble func(error)) *recorder {
	r := &recorder{st: st, ch: make(chan recorderItem, buffer), trouble: trouble}
	return r
}

func (r *recorder) setRun(id store.RunID) { r.current.Store(uint64(id)) }

// Sample implements poll.Sink: it never waits.
func (r *recorder) Sample(instrument string, rd drivers.Reading, err error) {
	run := store.RunID(r.current.Load())
	if run == 0 {
		return // readings are stored during runs only
	}
	smp := store.Sample{Time: rd.Time, Pa: rd.Pa, Raw: rd.Raw, RawUnit: rd.RawUnit, Wire: rd.Wire}
	if err != nil {
		smp = store.Sample{Time: rd.Time, Wire: rd.Wire, Failed: true, Kind: drivers.KindOf(err), Message: err.Error()}
	}
	r.mu.RLock()
	defer r.mu.RUnlock()
	if r.closed.Load() {
		return
	}
	select {
	case r.ch <- recorderItem{run: run, instrument: instrument, sample: smp}:
	default:
		if r.lost.Add(1) == 1 {
			go r.trouble(fmt.Errorf("the store is not keeping up: %d samples wait for it", cap(r.ch)))
		}
	}
}

func (r *recorder) loop() {
	for it := range r.ch {
		if it.flushed != nil {
			it.flushed <- r.st.Flush()
			continue
		}
		// A sample racing the end of its run is refused by the store; it
		// belongs to no run, so that is not a fault.
		if err := r.st.Put(it.run, it.instrument, it.sample); err != nil && !errors.Is(err, store.ErrRunEnded) {
			r.trouble(fmt.Errorf("store a sample of %s: %w", it.instrument, err))
		}
	}
}

// flush returns once every sample handed over before it is committed, or
// with the commit error. It waits at most timeout for room in the hand-off.
func (r *recorder) flush(ctx context.Context, timeout time.Duration) error {
	if n := r.lost.Load(); n > 0 {
		return fmt.Errorf("%d samples could not be handed to the store", n)
	}
	ch := make(chan error, 1)
	r.mu.RLock()
	if r.closed.Load() {
		r.mu.RUnlock()
		return errors.New("the sample recorder has stopped")
	}
	select {
	case r.ch <- recorderItem{flushed: ch}:
	case <-ctx.Done():
		r.mu.RUnlock()
		return ctx.Err()
	case <-time.After(timeout):
		r.mu.RUnlock()
		return errors.New("the store did not take the samples in time")
	}
	r.mu.RUnlock()
	select {
	case err := <-ch:
		return err
	case <-ctx.Done():
		return ctx.Err()
	}
}

// clearLost forgets the samples lost during a store fault once a person
// resumes: the points captured after that use fresh windows.
func (r *recorder) clearLost() uint64 { return r.lost.Swap(0) }

// close stops the goroutine after the samples handed over are written.
func (r *recorder) close() {
	r.once.Do(func() {
		r.mu.Lock()
		r.closed.Store(true)
		close(r.ch)
		r.mu.Unlock()
	})
}
