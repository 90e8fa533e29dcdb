// Package store keeps plateau's runs, raw samples, captured points and events
// in one bbolt file, so that nothing committed is lost when power or a cable
// fails.
//
// Layout (all integer keys are 8-byte big-endian, so byte order is numeric
// order):
//
//	meta                     "format" → "2" (files of format "1" are still read and written)
//	runs                     <run id>  → bucket, one per run (ids from NextSequence)
//	  "run"                  → sealed JSON runRecord (label, config, state, times, cursor)
//	  points                 <cycle u32><len><kind><len><direction><index u32> → sealed JSON {seq, stored, point}
//	  samples                <instrument name> → bucket
//	    <unix ns of first sample in the block> → block of samples (see block.go)
//	events                   <event id> → sealed JSON Event (ids from NextSequence)
//
// Sealed records and sample blocks carry a CRC-32C (seal.go, block.go), so
// damage inside a record is found when it is read. Before bbolt maps a
// file, Open checks its pages with plain reads (pages.go), and every bbolt
// call runs under a guard that turns a panic into an error (guard.go).
//
// Synchronous, committed before return: CreateRun, SetState, SetCursor,
// AddPoint, AddEvent. Asynchronous, through one writer goroutine that commits
// one Update per FlushInterval or per BatchSamples items: Put and
// QueueEvent; Flush waits until everything queued before it is committed.
// The writer closes and reopens the file every few MiB of new data
// (reopen.go), between transactions and only when none is in flight.
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

// formatVersion is written into new files; format "1" files (unsealed
// records, version-1 sample blocks) are still read, and new records written
// to them are sealed.
const (
	formatVersion = "2"
	formatLegacy  = "1"
)

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
	ErrDamaged    = errors.New("store file is damaged")
	ErrUnfinished = errors.New("the store holds an unfinished run")
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
	// When it is full Put blocks; samples are never dropped.
	QueueSize int
	// WireEvery keeps the wire text of every WireEvery-th good reading per
	// instrument (default 100; 1 keeps all; negative keeps none). The wire
	// text of a failed read is always kept.
	WireEvery int
	// MaxSize caps the file size in bytes (0 = no cap); writes beyond it fail.
	MaxSize int
	// Clock stamps runs and events that come without a time (default wall).
	Clock clock.Clock
	// ReadOnly opens an existing file without writing to it (no writer,
	// no lock held against other readers); writes return an error.
	ReadOnly bool
	// StartCheck is how much Open checks before it returns: CheckBounded
	// (the default), CheckFull or CheckPagesOnly.
	StartCheck CheckDepth

	reopenPages int // pages committed between reopens (default reopenPages); tests set fewer
}

// CheckDepth says how much of a store a check reads.
type CheckDepth int

const (
	// CheckBounded reads every page of the file's tree except the leaf
	// pages of sample buckets, every run and point record, the newest 1000
	// events and the newest block of every sample stream.
	CheckBounded CheckDepth = iota
	// CheckFull reads everything: bbolt's consistency check, every record,
	// every event and every sample block.
	CheckFull
	// CheckPagesOnly checks the meta pages, the file size and the whole
	// page tree but decodes no records; for callers that run Check next.
	CheckPagesOnly
)

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
	if o.reopenPages <= 0 {
		o.reopenPages = reopenPages
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
	// dbMu guards db and dbErr: every transaction holds it for reading,
	// the writer takes it to reopen the file (reopen.go). db is nil, with
	// dbErr saying why, after a reopen that failed.
	dbMu       sync.RWMutex
	db         *bolt.DB
	dbErr      error
	liveAtOpen int // live pages when the file was last opened; the writer's only (reopen.go)
	opt        Options
	path       string
	legacy     bool // format-1 file: unsealed records accepted

	// mu guards closed; every operation holds it for reading so that Close
	// (which takes it for writing) waits for operations in flight.
	mu      sync.RWMutex
	closed  bool
	closing atomic.Bool // set first thing in Close, read by the writer without locking

	runsMu sync.Mutex
	runs   map[RunID]State // every run's state, for cheap checks in Put

	queue   chan job
	flushes chan chan error
	done    chan struct{}
	status  writerState
}

// Open opens the store at path, creating it when the file does not exist.
// An existing file is checked first (Options.StartCheck); a damaged file,
// an empty one or one that is not a plateau store is refused with an error
// naming the file and what is wrong.
func Open(path string, opt Options) (*Store, error) {
	opt, err := opt.withDefaults()
	if err != nil {
		return nil, err
	}
	_, statErr := os.Stat(path)
	fresh := errors.Is(statErr, os.ErrNotExist)
	switch {
	case fresh && opt.ReadOnly:
		return nil, fmt.Errorf("open store %s: %w", path, statErr)
	case !fresh && statErr != nil:
		return nil, fmt.Errorf("open store %s: %w", path, statErr)
	case !fresh:
		if _, err := inspectFile(path, opt.StartCheck == CheckBounded); err != nil {
			return nil, refusal(path, err)
		}
	}
	db, err := openBolt(path, opt)
	if err != nil {
		if errors.Is(err, bolt.ErrTimeout) {
			return nil, fmt.Errorf("open store %s: another process holds it (waited %v): %w", path, opt.Timeout, err)
		}
		return nil, refusal(path, err)
	}
	s := &Store{db: db, opt: opt, path: path, runs: map[RunID]State{},
		queue: make(chan job, opt.QueueSize), flushes: make(chan chan error), done: make(chan struct{})}
	if err := s.guard("open", func() error { return s.init(fresh) }); err != nil {
		db.Close()
		return nil, refusal(path, err)
	}
	if !fresh && opt.StartCheck != CheckPagesOnly {
		if err := s.checkContent(opt.StartCheck); err != nil {
			db.Close()
			return nil, refusal(path, err)
		}
	}
	if opt.ReadOnly {
		close(s.done)
		return s, nil
	}
	if err := s.startTracking(); err != nil {
		db.Close()
		return nil, refusal(path, err)
	}
	go s.writer()
	return s, nil
}

// SalvageHint is the command that copies what can be read out of a damaged
// store into a new file.
func SalvageHint(path string) string {
	return fmt.Sprintf("plateau salvage --store %s NEW-FILE", path)
}

func refusal(path string, err error) error {
	if errors.Is(err, ErrDamaged) {
		return fmt.Errorf("open store %s: %w; copy out what can be read with: %s", path, err, SalvageHint(path))
	}
	return fmt.Errorf("open store %s: %w", path, err)
}

// openBolt opens the file with bbolt under the guard; if bbolt panics while
// opening, the file it opened is closed so its lock is released.
func openBolt(path string, opt Options) (db *bolt.DB, err error) {
	var file *os.File
	bo := &bolt.Options{Timeout: opt.Timeout, MaxSize: opt.MaxSize, ReadOnly: opt.ReadOnly,
		OpenFile: func(name string, flag int, mode os.FileMode) (*os.File, error) {
			f, err := os.OpenFile(name, flag, mode)
			file = f
			return f, err
		}}
	err = guarded(path, "open", func() error {
		var err error
		db, err = bolt.Open(path, opt.Mode, bo)
		return err
	})
	if err != nil && db == nil && file != nil && errors.Is(err, ErrDamaged) {
		file.Close()
	}
	return db, err
}

// init reads the store's meta and runs in a read transaction, so opening an
// existing store writes nothing (a store refused by the check after this
// stays byte-identical); only a new file gets its buckets.
func (s *Store) init(fresh bool) error {
	create := false
	err := s.db.View(func(tx *bolt.Tx) error {
		meta := tx.Bucket(bucketMeta)
		if meta == nil {
			// A bbolt file with nothing in it is one whose creation was cut
			// short before its buckets were made: nothing to lose, so take it.
			if first, _ := tx.Cursor().First(); first != nil || (s.opt.ReadOnly && !fresh) {
				return fmt.Errorf("a bbolt file without plateau's meta bucket: %w", ErrWrongFile)
			}
			create = true
			return nil
		}
		if err := s.setFormat(meta.Get(keyFormat)); err != nil {
			return err
		}
		if tx.Bucket(bucketRuns) == nil || tx.Bucket(bucketEvents) == nil {
			return fmt.Errorf("the runs or events bucket is missing: %w", ErrDamaged)
		}
		return s.loadRuns(tx)
	})
	if err != nil || !create {
		return err
	}
	return s.db.Update(func(tx *bolt.Tx) error {
		meta, err := tx.CreateBucket(bucketMeta)
		if err != nil {
			return err
		}
		if err := meta.Put(keyFormat, []byte(formatVersion)); err != nil {
			return err
		}
		for _, name := range [][]byte{bucketRuns, bucketEvents} {
			if _, err := tx.CreateBucket(name); err != nil {
				return err
			}
		}
		return s.setFormat([]byte(formatVersion))
	})
}

func (s *Store) setFormat(v []byte) error {
	switch string(v) {
	case formatVersion:
	case formatLegacy:
		s.legacy = true
	default:
		return fmt.Errorf("format %q, this build reads %q and %q: %w", v, formatLegacy, formatVersion, ErrWrongFile)
	}
	return nil
}

func (s *Store) loadRuns(tx *bolt.Tx) error {
	return tx.Bucket(bucketRuns).ForEachBucket(func(k []byte) error {
		if len(k) != 8 {
			return fmt.Errorf("run key %x is not 8 bytes: %w", k, ErrDamaged)
		}
		r, err := s.readRun(tx, RunID(binary.BigEndian.Uint64(k)))
		if err != nil {
			return err
		}
		s.runs[r.ID] = r.State
		return nil
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
	if !s.opt.ReadOnly {
		close(s.queue)
	}
	s.mu.Unlock()
	<-s.done
	ws := s.status.get()
	if s.db != nil { // nil after a reopen that failed: dbErr says why
		if err := s.db.Close(); err != nil {
			return fmt.Errorf("close store %s: %w", s.path, err)
		}
	}
	if ws.Err != nil {
		return fmt.Errorf("close store %s: %d queued items could not be committed: %w", s.path, ws.Pending, ws.Err)
	}
	if s.db == nil {
		return fmt.Errorf("close store %s: %w", s.path, s.dbErr)
	}
	return nil
}

// Check reads the whole store: bbolt's consistency check, then every run,
// point, event and sample block with its checksum. It returns every
// problem found, joined; damage is marked ErrDamaged.
func (s *Store) Check() error {
	end, err := s.begin()
	if err != nil {
		return err
	}
	defer end()
	var errs []error
	err = s.view("check", func(tx *bolt.Tx) error {
		for e := range tx.Check() {
			errs = append(errs, e)
		}
		return nil
	})
	if err == nil && len(errs) == 0 {
		err = s.checkContent(CheckFull)
	}
	if err != nil {
		errs = append(errs, err)
	}
	if len(errs) > 0 {
		all := errors.Join(errs...)
		if !errors.Is(all, ErrDamaged) {
			all = fmt.Errorf("%w: %w", ErrDamaged, all)
		}
		return fmt.Errorf("check store %s: %d problems: %w", s.path, len(errs), all)
	}
	return nil
}

// Backup writes a consistent copy of the whole file to w while the store
// stays in use, and returns the bytes written.
func (s *Store) Backup(w io.Writer) (int64, error) {
	var n int64
	err := s.view("backup", func(tx *bolt.Tx) error {
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
