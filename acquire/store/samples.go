package store

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"sync"
	"time"

	bolt "go.etcd.io/bbolt"

	"plateau/drivers"
)

// job is one item for the writer goroutine: a sample or an event.
type job struct {
	run        RunID
	instrument string
	sample     Sample

	event     *Event
	committed func(Event, error)
}

// SampleOf is the stored form of a driver's reading: good (err nil), or a
// failed read keeping its time, wire text, kind and message.
func SampleOf(r drivers.Reading, err error) Sample {
	if err != nil {
		return Sample{Time: r.Time, Wire: r.Wire, Failed: true, Kind: drivers.KindOf(err), Message: err.Error()}
	}
	return Sample{Time: r.Time, Pa: r.Pa, Raw: r.Raw, RawUnit: r.RawUnit, Wire: r.Wire}
}

// Put queues one sample of one instrument for the next batched commit. It
// returns at once unless the queue is full, in which case it waits: samples
// are never dropped. It refuses an unknown or ended run, an empty
// instrument name, a sample without a time and a failed read that carries
// values (a failed read keeps its kind, message and wire text only).
func (s *Store) Put(run RunID, instrument string, smp Sample) error {
	if instrument == "" || len(instrument) > 255 {
		return fmt.Errorf("add sample to run %s: instrument name %q must have 1 to 255 bytes (%w)", run, instrument, ErrBadInput)
	}
	if smp.Time.IsZero() || smp.Time.Before(time.Unix(0, 0)) {
		return fmt.Errorf("add sample of %s to run %s: reading time %v is unset or before 1970 (%w)", instrument, run, smp.Time, ErrBadInput)
	}
	if smp.Failed && (smp.Pa != 0 || smp.Raw != 0 || smp.RawUnit != "") {
		return fmt.Errorf("add sample of %s to run %s: a failed read carries a value (%w)", instrument, run, ErrBadInput)
	}
	if cerr := s.checkRunOpen(run); cerr != nil {
		return fmt.Errorf("add sample of %s: %w", instrument, cerr)
	}
	return s.enqueue(job{run: run, instrument: instrument, sample: smp})
}

func (s *Store) enqueue(j job) error {
	end, err := s.begin()
	if err != nil {
		return err
	}
	defer end()
	if s.opt.ReadOnly {
		return fmt.Errorf("store %s is open read-only (%w)", s.path, ErrBadInput)
	}
	s.queue <- j
	return nil
}

// Flush commits everything queued before it and returns the commit error,
// if any. It does not wait for a failing disk: while the writer cannot
// commit, Flush returns the error at once and the samples stay pending.
func (s *Store) Flush() error {
	end, err := s.begin()
	if err != nil {
		return err
	}
	if s.opt.ReadOnly {
		end()
		return nil
	}
	ch := make(chan error, 1)
	s.flushes <- ch
	end()
	return <-ch
}

// WriterStatus tells whether the writer goroutine keeps up, for the health
// check and the service watchdog.
type WriterStatus struct {
	LastCommit time.Time // store clock time of the last successful batch commit
	Committed  uint64    // samples and queued events committed since Open
	Pending    int       // items taken from the queue and not yet committed (retried until they are)
	Failures   uint64    // failed commits since Open
	Err        error     // the last commit error; nil once a commit succeeds again
	Streams    int       // sample streams the writer keeps a block of: one per instrument of each run not yet ended
	Reopens    uint64    // times the writer closed and reopened the file since Open (see reopen.go)
}

type writerState struct {
	mu sync.Mutex
	st WriterStatus
}

func (w *writerState) get() WriterStatus {
	w.mu.Lock()
	defer w.mu.Unlock()
	return w.st
}

func (w *writerState) set(f func(*WriterStatus)) {
	w.mu.Lock()
	f(&w.st)
	w.mu.Unlock()
}

// WriterStatus returns the writer's progress.
func (s *Store) WriterStatus() WriterStatus { return s.status.get() }

// Queued is the number of items waiting in front of the writer.
func (s *Store) Queued() int { return len(s.queue) }

type streamKey struct {
	run        RunID
	instrument string
}

// stream is the writer's memory of the block being filled for one
// instrument of one run, so each commit appends instead of re-reading.
type stream struct {
	block blockWriter
	open  bool   // block holds the current block
	good  uint64 // good readings seen, for WireEvery
}

// writer is the one goroutine that writes samples: it commits a batch when
// FlushInterval has passed since the first queued item, when BatchSamples
// items wait, on Flush and on Close. A failed commit keeps its items
// pending and is retried every FlushInterval; once 4 × BatchSamples items
// are pending it stops taking new ones, so producers wait instead of
// memory growing, while Flush still answers at once with the error.
func (s *Store) writer() {
	defer close(s.done)
	streams := map[streamKey]*stream{}
	var pending []job
	timer := time.NewTimer(time.Hour)
	timer.Stop()
	armed := false
	arm := func() {
		if !armed {
			timer.Reset(s.opt.FlushInterval)
			armed = true
		}
	}
	commit := func() error {
		err := s.commit(streams, pending)
		if err == nil {
			pending = pending[:0]
		} else {
			arm()
		}
		return err
	}
	take := func(j job) {
		pending = append(pending, j)
		if len(pending) >= s.opt.BatchSamples && len(pending)%s.opt.BatchSamples == 0 {
			commit()
		}
		arm()
	}
	limit := 4 * s.opt.BatchSamples
	for {
		in := s.queue
		if len(pending) >= limit {
			in = nil // back-pressure
		}
		select {
		case j, ok := <-in:
			if !ok {
				s.drainAtClose(streams, pending)
				return
			}
			take(j)
		case ch := <-s.flushes:
			// Everything queued before the Flush call is in the queue now:
			// commit that much (not what producers add meanwhile, or a
			// busy queue would keep Flush waiting).
			err := commit()
			for n := len(s.queue); err == nil && n > 0; {
				for ; n > 0 && len(pending) < limit; n-- {
					pending = append(pending, <-s.queue)
				}
				err = commit()
			}
			ch <- err
		case <-timer.C:
			armed = false
			commit()
		}
	}
}

// drainAtClose commits what is left when the queue closes, retrying a
// failing commit a few times; what still fails is counted in the status
// (Close reports it) and failed to the events' callbacks.
func (s *Store) drainAtClose(streams map[streamKey]*stream, pending []job) {
	var err error
	for try := range 3 {
		if err = s.commit(streams, pending); err == nil {
			return
		}
		time.Sleep(time.Duration(try+1) * s.opt.FlushInterval)
	}
	for _, j := range pending {
		if j.committed != nil {
			j.committed(*j.event, err)
		}
	}
}

// commit writes the pending jobs in one Update. The streams map changes only
// when the transaction commits, so a failed commit can be retried as is.
func (s *Store) commit(streams map[streamKey]*stream, pending []job) error {
	if len(pending) == 0 {
		return nil
	}
	if s.db == nil {
		s.reopenIfDue(0) // an earlier reopen failed: try again first
	}
	staged := map[streamKey]*stream{}
	var highWater int64
	err := s.update("commit samples", func(tx *bolt.Tx) error {
		clear(staged)
		for _, j := range pending {
			if j.event != nil {
				if err := putEvent(tx, j.event); err != nil {
					return err
				}
				continue
			}
			k := streamKey{j.run, j.instrument}
			st, ok := staged[k]
			if !ok {
				st = &stream{}
				if old := streams[k]; old != nil {
					*st = *old
					st.block = old.block.clone()
				}
				staged[k] = st
			}
			if err := s.appendSample(tx, k, st, j.sample); err != nil {
				return err
			}
		}
		for k, st := range staged {
			b, err := sampleBucket(tx, k)
			if err != nil {
				return err
			}
			if err := b.Put(u64(uint64(st.block.key)), st.block.bytes()); err != nil {
				return fmt.Errorf("samples of %s in run %s: %w", k.instrument, k.run, err)
			}
		}
		highWater = tx.Size()
		return nil
	})
	if err != nil {
		err = fmt.Errorf("%w: commit of %d queued items: %w", ErrStoreWrite, len(pending), err)
		s.status.set(func(w *WriterStatus) { w.Err, w.Pending = err, len(pending); w.Failures++ })
		return err
	}
	for k, st := range staged {
		streams[k] = st
	}
	s.forgetEnded(streams)
	now := s.opt.Clock.Now()
	s.status.set(func(w *WriterStatus) {
		w.LastCommit, w.Err, w.Pending = now, nil, 0
		w.Committed += uint64(len(pending))
		w.Streams = len(streams)
	})
	for _, j := range pending {
		if j.committed != nil {
			j.committed(*j.event, nil)
		}
	}
	s.reopenIfDue(highWater)
	return nil
}

// forgetEnded drops the writer's blocks of runs that have ended: their
// last block is committed and no sample of theirs is taken any more, so a
// daemon that runs for months keeps no memory per past run. A sample queued
// just before its run ended still lands, in a block of its own.
func (s *Store) forgetEnded(streams map[streamKey]*stream) {
	s.runsMu.Lock()
	defer s.runsMu.Unlock()
	for k := range streams {
		if s.runs[k.run].Terminal() {
			delete(streams, k)
		}
	}
}

// sampleStream returns the instrument's sample bucket of the run for
// reading: nil when the instrument has no samples, ErrNoRun without a run.
func sampleStream(tx *bolt.Tx, run RunID, instrument string) (*bolt.Bucket, error) {
	rb, err := runBucket(tx, run)
	if err != nil {
		return nil, err
	}
	return rb.Bucket(bucketSamples).Bucket([]byte(instrument)), nil
}

// sampleBucket returns the instrument's sample bucket of the run, creating
// it on first use, with FillPercent set for append-only writes.
func sampleBucket(tx *bolt.Tx, k streamKey) (*bolt.Bucket, error) {
	rb, err := runBucket(tx, k.run)
	if err != nil {
		return nil, err
	}
	b, err := rb.Bucket(bucketSamples).CreateBucketIfNotExists([]byte(k.instrument))
	if err != nil {
		return nil, fmt.Errorf("samples of %s in run %s: %w", k.instrument, k.run, err)
	}
	b.FillPercent = 1.0
	return b, nil
}

func (s *Store) appendSample(tx *bolt.Tx, k streamKey, st *stream, smp Sample) error {
	keepWire := smp.Failed
	if !smp.Failed {
		keepWire = s.opt.WireEvery > 0 && st.good%uint64(s.opt.WireEvery) == 0
		st.good++
	}
	if st.open && (smp.Failed || smp.RawUnit == st.block.unit) && st.block.add(smp, keepWire) {
		return nil
	}
	// Start a new block: the current one is full or the unit changed.
	b, err := sampleBucket(tx, k)
	if err != nil {
		return err
	}
	if st.open {
		if err := b.Put(u64(uint64(st.block.key)), st.block.bytes()); err != nil {
			return fmt.Errorf("samples of %s in run %s: %w", k.instrument, k.run, err)
		}
	}
	// A new block's key must sort after every existing key of the bucket.
	key := smp.Time.UnixNano()
	if last, _ := b.Cursor().Last(); last != nil {
		if lk := int64(binary.BigEndian.Uint64(last)); lk >= key {
			key = lk + 1
		}
	}
	unit := smp.RawUnit
	if smp.Failed {
		unit = st.block.unit
	}
	st.block = newBlock(key, unit)
	st.open = true
	st.block.add(smp, keepWire)
	return nil
}

// Samples calls fn for each committed sample of the instrument in the run
// with from ≤ Time ≤ to, in stored order (time order, as the acquisition
// clock gave them); a zero from or to leaves that end open. Samples still
// queued are not seen; call Flush first when that matters. fn runs outside
// any transaction, so it may take its time; returning an error stops the
// iteration and Samples returns it.
func (s *Store) Samples(run RunID, instrument string, from, to time.Time, fn func(Sample) error) error {
	var fromNs, toNs int64 = 0, 1<<63 - 1
	if !from.IsZero() {
		fromNs = from.UnixNano()
	}
	if !to.IsZero() {
		toNs = to.UnixNano()
	}
	const blocksPerChunk = 64 // short read transactions: a long one would stall file growth
	var next []byte           // key of the next block to read; nil = start
	var chunk []Sample
	for {
		chunk = chunk[:0]
		done := true
		err := s.view("read samples", func(tx *bolt.Tx) error {
			b, err := sampleStream(tx, run, instrument)
			if b == nil {
				return err
			}
			c := b.Cursor()
			var k, v []byte
			if next == nil {
				// Start one block before the first keyed at or after from:
				// that block may end with samples at or after from.
				if k, _ = c.Seek(u64(uint64(fromNs))); k == nil {
					k, v = c.Last()
				} else if k, v = c.Prev(); k == nil {
					k, v = c.First()
				}
			} else {
				k, v = c.Seek(next)
			}
			for n := 0; k != nil; k, v = c.Next() {
				key := int64(binary.BigEndian.Uint64(k))
				if key > toNs {
					return nil
				}
				if n == blocksPerChunk {
					next, done = bytes.Clone(k), false
					return nil
				}
				n++
				err := decodeBlock(key, v, func(smp Sample) error {
					if ns := smp.Time.UnixNano(); ns >= fromNs && ns <= toNs {
						chunk = append(chunk, smp)
					}
					return nil
				})
				if err != nil {
					return err
				}
			}
			return nil
		})
		if err != nil {
			return fmt.Errorf("samples of %s in run %s: %w", instrument, run, err)
		}
		for _, smp := range chunk {
			if err := fn(smp); err != nil {
				return err
			}
		}
		if done {
			return nil
		}
	}
}

// Instruments lists the instruments that have samples in the run.
func (s *Store) Instruments(run RunID) ([]string, error) {
	var out []string
	err := s.view("list instruments", func(tx *bolt.Tx) error {
		rb, err := runBucket(tx, run)
		if err != nil {
			return err
		}
		return rb.Bucket(bucketSamples).ForEachBucket(func(k []byte) error {
			out = append(out, string(k))
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("instruments of run %s: %w", run, err)
	}
	return out, nil
}
