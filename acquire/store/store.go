// Package store keeps plateau's runs, raw samples, captured points and events
// in one bbolt file, so that nothing committed is lost when power or a cable
// fails.
//
// Layout (all integer keys are 8-byte big-endian, so byte order is numeric
// order):
//
//	meta                     "format" → "1"
//	runs                     <run id>  → bucket, one per run (ids from NextSequence)
//	  "run"                  → JSON runRecord (label, config, state, times, cursor)
//	  points                 <cycle u32><len><kind><len><direction><index u32> → JSON {seq, stored, point}
//	  samples                <instrument name> → bucket
//	    <unix ns of first sample in the block> → block of samples (see block.go)
//	events                   <event id> → JSON Event (ids from NextSequence)
//
// Synchronous, committed before return: CreateRun, SetState, SetCursor,
// AddPoint, AddEvent. Asynchronous, through one writer goroutine that commits
// one Update per FlushInterval or per BatchSamples items: AddSample and
// QueueEvent; Flush waits until everything queued before it is committed.
// A Store is safe for concurrent use.
package store

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	bolt "go.etcd.io/bbolt"

	"plateau/drivers/clock"
)

const formatVersion = "1"

var (
	bucketMeta    = []byte("meta")
	bucketRuns    = []byte("runs")
	bucketEvents  = []byte("events")
	bucketPoints  = []byte("points")
	bucketSamples = []byte("samples")
	keyRun        = []byte("run")
	keyFormat     = []byte("format")
)

// Errors callers can compare with errors.Is.
var (
	ErrClosed     = errors.New("store is closed")
	ErrNoRun      = errors.New("no such run")
	ErrRunEnded   = errors.New("run has ended")
	ErrBadInput   = errors.New("invalid input")
	ErrBadRecord  = errors.New("stored record cannot be decoded")
	ErrWrongFile  = errors.New("not a plateau store")
	ErrStoreWrite = errors.New("store writer failed")
)

// Options tune a store; the zero value gives the defaults.
type Options struct {
	// Timeout bounds the wait for the file lock when another process has
	// the store open (default 1 s); bbolt would otherwise wait forever.
	Timeout time.Duration
	// Mode is the file mode when the file is created: 0600 (default) or 0640.
	Mode os.FileMode
	// FlushInterval is the longest a queued sample waits for its commit
	// (default 250 ms, wall time: it paces disk writes, not acquisition).
	FlushInterval time.Duration
	// BatchSamples commits early once this many items are queued (default 2000).
	BatchSamples int
	// QueueSize is the channel buffer in front of the writer (default 8192).
	// When it is full AddSample blocks; samples are never dropped.
	QueueSize int
	// WireEvery keeps the wire text of every WireEvery-th good reading per
	// instrument (default 100; 1 keeps all; negative keeps none). The wire
	// text of a failed read is always kept.
	WireEvery int
	// MaxSize caps the file size in bytes (0 = no cap); writes beyond it fail.
	MaxSize int
	// Clock stamps runs and events that come without a time (default wall).
	Clock clock.Clock
}

func (o Options) withDefaults() (Options, error) {
	if o.Timeout <= 0 {
		o.Timeout = time.Second
	}
	if o.Mode == 0 {
		o.Mode = 0o600
	}
	if o.Mode != 0o600 && o.Mode != 0o640 {
		return o, fmt.Errorf("store file mode %#o: use 0600 or 0640 (%w)", o.Mode, ErrBadInput)
	}
	if o.FlushInterval <= 0 {
		o.FlushInterval = 250 * time.Millisecond
	}
	if o.BatchSamples <= 0 {
		o.BatchSamples = 2000
	}
	if o.QueueSize <= 0 {
		o.QueueSize = 8192
	}
	if o.WireEvery == 0 {
		o.WireEvery = 100
	}
	if o.Clock == nil {
		o.Clock = clock.Wall{}
	}
	return o, nil
}

// RunID identifies a run. Ids increase with creation order; people see them
// as "r" and six or more decimal digits, e.g. r000042.
type RunID uint64

func (id RunID) String() string { return fmt.Sprintf("r%06d", uint64(id)) }

// ParseRunID reads "r000042", "r42" or "42".
func ParseRunID(s string) (RunID, error) {
	n, err := strconv.ParseUint(strings.TrimPrefix(strings.TrimSpace(s), "r"), 10, 64)
	if err != nil || n == 0 {
		return 0, fmt.Errorf("run id %q: want r followed by digits, e.g. r000042 (%w)", s, ErrBadInput)
	}
	return RunID(n), nil
}

// Store is an open plateau store.
type Store struct {
	db   *bolt.DB
	opt  Options
	path string

	// mu guards closed; every operation holds it for reading so that Close
	// (which takes it for writing) waits for operations in flight.
	mu      sync.RWMutex
	closed  bool
	closing atomic.Bool // set first thing in Close, read by the writer without locking

	runsMu sync.Mutex
	runs   map[RunID]State // every run's state, for cheap checks in AddSample

	queue  chan job
	done   chan struct{}
	status writerState
}

// Open opens or creates the store at path.
func Open(path string, opt Options) (*Store, error) {
	opt, err := opt.withDefaults()
	if err != nil {
		return nil, err
	}
	db, err := bolt.Open(path, opt.Mode, &bolt.Options{Timeout: opt.Timeout, MaxSize: opt.MaxSize})
	if err != nil {
		if errors.Is(err, bolt.ErrTimeout) {
			return nil, fmt.Errorf("open store %s: another process holds it (waited %v): %w", path, opt.Timeout, err)
		}
		return nil, fmt.Errorf("open store %s: %w", path, err)
	}
	s := &Store{db: db, opt: opt, path: path, runs: map[RunID]State{},
		queue: make(chan job, opt.QueueSize), done: make(chan struct{})}
	if err := s.init(); err != nil {
		db.Close()
		return nil, fmt.Errorf("open store %s: %w", path, err)
	}
	go s.writer()
	return s, nil
}

func (s *Store) init() error {
	return s.db.Update(func(tx *bolt.Tx) error {
		meta, err := tx.CreateBucketIfNotExists(bucketMeta)
		if err != nil {
			return err
		}
		switch v := meta.Get(keyFormat); {
		case v == nil && tx.Bucket(bucketRuns) == nil:
			if err := meta.Put(keyFormat, []byte(formatVersion)); err != nil {
				return err
			}
		case string(v) != formatVersion:
			return fmt.Errorf("format %q, this build reads %q: %w", v, formatVersion, ErrWrongFile)
		}
		for _, name := range [][]byte{bucketRuns, bucketEvents} {
			if _, err := tx.CreateBucketIfNotExists(name); err != nil {
				return err
			}
		}
		return tx.Bucket(bucketRuns).ForEachBucket(func(k []byte) error {
			r, err := readRun(tx, RunID(binary.BigEndian.Uint64(k)))
			if err != nil {
				return err
			}
			s.runs[r.ID] = r.State
			return nil
		})
	})
}

// begin admits one operation unless the store is closed; call end when done.
func (s *Store) begin() (end func(), err error) {
	s.mu.RLock()
	if s.closed {
		s.mu.RUnlock()
		return nil, ErrClosed
	}
	return s.mu.RUnlock, nil
}

// Path returns the file the store was opened from.
func (s *Store) Path() string { return s.path }

// Close commits everything queued, stops the writer and closes the file.
func (s *Store) Close() error {
	s.closing.Store(true)
	s.mu.Lock()
	if s.closed {
		s.mu.Unlock()
		return ErrClosed
	}
	s.closed = true
	close(s.queue)
	s.mu.Unlock()
	<-s.done
	werr := s.status.get().Err
	if err := s.db.Close(); err != nil {
		return fmt.Errorf("close store %s: %w", s.path, err)
	}
	if werr != nil {
		return fmt.Errorf("close store %s: last queued write failed: %w", s.path, werr)
	}
	return nil
}

// Check runs bbolt's consistency check in a read-only transaction and
// returns every problem it finds, joined.
func (s *Store) Check() error {
	var errs []error
	err := s.db.View(func(tx *bolt.Tx) error {
		for e := range tx.Check() {
			errs = append(errs, e)
		}
		return nil
	})
	if err != nil {
		return fmt.Errorf("check store %s: %w", s.path, err)
	}
	if len(errs) > 0 {
		return fmt.Errorf("check store %s: %d problems: %w", s.path, len(errs), errors.Join(errs...))
	}
	return nil
}

// Backup writes a consistent copy of the whole file to w while the store
// stays in use, and returns the bytes written.
func (s *Store) Backup(w io.Writer) (int64, error) {
	var n int64
	err := s.db.View(func(tx *bolt.Tx) error {
		var err error
		n, err = tx.WriteTo(w)
		return err
	})
	if err != nil {
		return n, fmt.Errorf("backup store %s: %w", s.path, err)
	}
	return n, nil
}

func u64(v uint64) []byte { return binary.BigEndian.AppendUint64(nil, v) }

// runBucket returns the run's bucket, or ErrNoRun.
func runBucket(tx *bolt.Tx, id RunID) (*bolt.Bucket, error) {
	b := tx.Bucket(bucketRuns).Bucket(u64(uint64(id)))
	if b == nil {
		return nil, fmt.Errorf("run %s: %w", id, ErrNoRun)
	}
	return b, nil
}
