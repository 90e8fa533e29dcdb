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

// job is one item for the writer goroutine: a sample, an event or a flush.
type job struct {
	run        RunID
	instrument string
	sample     Sample

	event     *Event
	committed func(Event, error)

	flushed chan error
}

// AddSample queues one reading of one instrument — good (err nil) or failed
// (err from the driver; its kind and text are kept) — for the next batched
// commit. It returns at once unless the queue is full, in which case it
// waits: samples are never dropped. It refuses an unknown or ended run, an
// empty instrument name and a reading without a time.
func (s *Store) AddSample(run RunID, instrument string, r drivers.Reading, err error) error {
	if instrument == "" || len(instrument) > 255 {
		return fmt.Errorf("add sample to run %s: instrument name %q must have 1 to 255 bytes (%w)", run, instrument, ErrBadInput)
	}
	if r.Time.IsZero() || r.Time.Before(time.Unix(0, 0)) {
		return fmt.Errorf("add sample of %s to run %s: reading time %v is unset or before 1970 (%w)", instrument, run, r.Time, ErrBadInput)
	}
	if cerr := s.checkRunOpen(run); cerr != nil {
		return fmt.Errorf("add sample of %s: %w", instrument, cerr)
	}
	smp := Sample{Time: r.Time, Pa: r.Pa, Raw: r.Raw, RawUnit: r.RawUnit, Wire: r.Wire}
	if err != nil {
		smp = Sample{Time: r.Time, Wire: r.Wire, Failed: true, Kind: drivers.KindOf(err), Message: err.Error()}
	}
	return s.enqueue(job{run: run, instrument: instrument, sample: smp})
}

func (s *Store) enqueue(j job) error {
	end, err := s.begin()
	if err != nil {
		return err
	}
	defer end()
	s.queue <- j
	return nil
}

// Flush waits until everything queued before it is committed and returns
// the commit error, if any.
func (s *Store) Flush() error {
	ch := make(chan error, 1)
	if err := s.enqueue(job{flushed: ch}); err != nil {
		return err
	}
	return <-ch
}

// WriterStatus tells whether the writer goroutine keeps up, for the health
// check and the service watchdog.
type WriterStatus struct {
	LastCommit time.Time // store clock time of the last successful batch commit
	Committed  uint64    // samples and queued events committed since Open
	Pending    int       // items of the batch that failed to commit (0 after a success)
	Err        error     // the last commit error; nil once a commit succeeds again
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
// items wait, on Flush and on Close.
func (s *Store) writer() {
	defer close(s.done)
	streams := map[streamKey]*stream{}
	var pending []job
	timer := time.NewTimer(time.Hour)
	timer.Stop()
	armed := false
	commit := func() error {
		err := s.commit(streams, pending)
		if err == nil {
			pending = pending[:0]
		} else if len(pending) >= 4*s.opt.BatchSamples {
			// Back-pressure: stop draining the queue so producers block
			// rather than grow memory without bound, and keep retrying.
			for err != nil && !s.isClosing() {
				time.Sleep(s.opt.FlushInterval)
				if err = s.commit(streams, pending); err == nil {
					pending = pending[:0]
				}
			}
		}
		return err
	}
	for {
		select {
		case j, ok := <-s.queue:
			switch {
			case !ok:
				if err := commit(); err != nil {
					for _, j := range pending {
						if j.committed != nil {
							j.committed(*j.event, err)
						}
					}
				}
				return
			case j.flushed != nil:
				j.flushed <- commit()
			default:
				pending = append(pending, j)
				if len(pending) >= s.opt.BatchSamples {
					commit()
				} else if !armed {
					timer.Reset(s.opt.FlushInterval)
					armed = true
				}
			}
		case <-timer.C:
			armed = false
			if commit() != nil {
				timer.Reset(s.opt.FlushInterval)
				armed = true
			}
		}
	}
}

func (s *Store) isClosing() bool { return s.closing.Load() }

// commit writes the pending jobs in one Update. The streams map changes only
// when the transaction commits, so a failed commit can be retried as is.
func (s *Store) commit(streams map[streamKey]*stream, pending []job) error {
	if len(pending) == 0 {
		return nil
	}
	staged := map[streamKey]*stream{}
	err := s.db.Update(func(tx *bolt.Tx) error {
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
					*st = *old // the block's bytes are shared but only appended past the committed length
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
			if err := b.Put(u64(uint64(st.block.key)), st.block.buf); err != nil {
				return fmt.Errorf("samples of %s in run %s: %w", k.instrument, k.run, err)
			}
		}
		return nil
	})
	if err != nil {
		err = fmt.Errorf("%w: commit of %d queued items: %w", ErrStoreWrite, len(pending), err)
		s.status.set(func(w *WriterStatus) { w.Err, w.Pending = err, len(pending) })
		return err
	}
	for k, st := range staged {
		streams[k] = st
	}
	now := s.opt.Clock.Now()
	s.status.set(func(w *WriterStatus) {
		w.LastCommit, w.Err, w.Pending = now, nil, 0
		w.Committed += uint64(len(pending))
	})
	for _, j := range pending {
		if j.committed != nil {
			j.committed(*j.event, nil)
		}
	}
	return nil
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
	ns := smp.Time.UnixNano()
	keepWire := smp.Failed
	if !smp.Failed {
		keepWire = s.opt.WireEvery > 0 && st.good%uint64(s.opt.WireEvery) == 0
		st.good++
	}
	var scratch [64]byte
	if st.open && (smp.Failed || smp.RawUnit == st.block.unit) {
		if rec := st.block.record(scratch[:0], ns, smp, keepWire); len(st.block.buf)+len(rec) <= blockBytes {
			st.block.add(rec, ns, smp)
			return nil
		}
	}
	// Start a new block: the current one is full or the unit changed.
	b, err := sampleBucket(tx, k)
	if err != nil {
		return err
	}
	if st.open {
		if err := b.Put(u64(uint64(st.block.key)), st.block.buf); err != nil {
			return fmt.Errorf("samples of %s in run %s: %w", k.instrument, k.run, err)
		}
	}
	// A new block's key must sort after every existing key of the bucket.
	key := ns
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
	st.block.add(st.block.record(scratch[:0], ns, smp, keepWire), ns, smp)
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
		err := s.db.View(func(tx *bolt.Tx) error {
			rb, err := runBucket(tx, run)
			if err != nil {
				return err
			}
			b := rb.Bucket(bucketSamples).Bucket([]byte(instrument))
			if b == nil {
				return nil
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
	err := s.db.View(func(tx *bolt.Tx) error {
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
