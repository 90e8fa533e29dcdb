package store

import (
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"time"

	bolt "go.etcd.io/bbolt"
)

// State is where a run is in its life.
type State string

const (
	StatePending  State = "pending"  // created, not started
	StateRunning  State = "running"  // the procedure is executing
	StatePaused   State = "paused"   // held by an operator or a fault; resumable
	StateFinished State = "finished" // every step done (terminal)
	StateFailed   State = "failed"   // stopped by a fault it could not ride out (terminal)
	StateStopped  State = "stopped"  // stopped by an operator (terminal)
)

// Terminal reports whether a run in this state can never change again.
func (s State) Terminal() bool {
	return s == StateFinished || s == StateFailed || s == StateStopped
}

func (s State) valid() bool {
	switch s {
	case StatePending, StateRunning, StatePaused, StateFinished, StateFailed, StateStopped:
		return true
	}
	return false
}

// Run is one calibration run as stored.
type Run struct {
	ID     RunID
	Label  string
	Config []byte // the configuration as used (YAML), opaque to the store
	// Record is what the run was frozen with when it was created (resolved
	// device, reference, procedure and decision rule), opaque to the store.
	Record  []byte
	State   State
	Reason  string // why it last changed state, e.g. the fault that failed it
	Created time.Time
	Updated time.Time
	// Cursor is opaque to the store: the engine writes which step of the
	// procedure is in progress so it can resume there.
	Cursor []byte
}

type runRecord struct {
	Label   string    `json:"label"`
	Config  []byte    `json:"config"`
	Record  []byte    `json:"record,omitempty"`
	State   State     `json:"state"`
	Reason  string    `json:"reason,omitempty"`
	Created time.Time `json:"created"`
	Updated time.Time `json:"updated"`
	Cursor  []byte    `json:"cursor,omitempty"`
}

func (s *Store) readRun(tx *bolt.Tx, id RunID) (Run, error) {
	b, err := runBucket(tx, id)
	if err != nil {
		return Run{}, err
	}
	js, err := unseal(b.Get(keyRun), s.legacy)
	if err != nil {
		return Run{}, fmt.Errorf("run %s: %w", id, err)
	}
	var rec runRecord
	if err := json.Unmarshal(js, &rec); err != nil {
		return Run{}, fmt.Errorf("run %s: %w: %v", id, ErrBadRecord, err)
	}
	if !rec.State.valid() {
		return Run{}, fmt.Errorf("run %s: state %q: %w", id, rec.State, ErrBadRecord)
	}
	return Run{ID: id, Label: rec.Label, Config: rec.Config, Record: rec.Record, State: rec.State, Reason: rec.Reason,
		Created: rec.Created, Updated: rec.Updated, Cursor: rec.Cursor}, nil
}

func writeRun(tx *bolt.Tx, r Run) error {
	b, err := runBucket(tx, r.ID)
	if err != nil {
		return err
	}
	v, err := json.Marshal(runRecord{Label: r.Label, Config: r.Config, Record: r.Record, State: r.State, Reason: r.Reason,
		Created: r.Created, Updated: r.Updated, Cursor: r.Cursor})
	if err != nil {
		return fmt.Errorf("run %s: %w", r.ID, err)
	}
	return b.Put(keyRun, seal(v))
}

// CreateRun stores a new pending run and returns it once committed.
func (s *Store) CreateRun(label string, config []byte) (Run, error) {
	return s.CreateFrozenRun(label, config, nil)
}

// CreateFrozenRun stores a new pending run with the record it is frozen
// with, and returns it once committed.
func (s *Store) CreateFrozenRun(label string, config, record []byte) (Run, error) {
	return s.createRun(label, config, record, false)
}

// UnfinishedError is the refusal of CreateSoleRun: the store already holds
// a run that has not ended.
type UnfinishedError struct {
	Run   RunID
	State State
}

func (e *UnfinishedError) Error() string {
	return fmt.Sprintf("run %s is still %s: resume it, or end it with stop, before starting another", e.Run, e.State)
}

func (e *UnfinishedError) Unwrap() error { return ErrUnfinished }

// CreateSoleRun is CreateFrozenRun that refuses, in the same transaction,
// while any run is unfinished (an *UnfinishedError naming the oldest), so
// the store never holds two runs in progress.
func (s *Store) CreateSoleRun(label string, config, record []byte) (Run, error) {
	return s.createRun(label, config, record, true)
}

func (s *Store) createRun(label string, config, record []byte, sole bool) (Run, error) {
	end, err := s.begin()
	if err != nil {
		return Run{}, err
	}
	defer end()
	now := s.opt.Clock.Now()
	r := Run{Label: label, Config: slices.Clone(config), Record: slices.Clone(record), State: StatePending, Created: now, Updated: now}
	err = s.update("create run", func(tx *bolt.Tx) error {
		runs := tx.Bucket(bucketRuns)
		if sole {
			var open *UnfinishedError
			err := runs.ForEachBucket(func(k []byte) error {
				r, err := s.readRun(tx, RunID(binary.BigEndian.Uint64(k)))
				if err == nil && !r.State.Terminal() && open == nil {
					open = &UnfinishedError{Run: r.ID, State: r.State}
				}
				return err
			})
			if err != nil {
				return err
			}
			if open != nil {
				return open
			}
		}
		seq, err := runs.NextSequence()
		if err != nil {
			return err
		}
		r.ID = RunID(seq)
		rb, err := runs.CreateBucket(u64(seq))
		if err != nil {
			return err
		}
		if _, err := rb.CreateBucket(bucketPoints); err != nil {
			return err
		}
		if _, err := rb.CreateBucket(bucketSamples); err != nil {
			return err
		}
		return writeRun(tx, r)
	})
	if err != nil {
		return Run{}, fmt.Errorf("create run %q: %w", label, err)
	}
	s.setRunState(r.ID, r.State)
	return r, nil
}

// SetState moves a run to a new state, with a reason for the record, and
// returns it once committed. A run in a terminal state cannot change.
func (s *Store) SetState(id RunID, state State, reason string) (Run, error) {
	if !state.valid() {
		return Run{}, fmt.Errorf("set run %s state %q: unknown state (%w)", id, state, ErrBadInput)
	}
	return s.updateRun(id, "state", func(r *Run) { r.State, r.Reason = state, reason })
}

// SetCursor records where the procedure is, once committed.
func (s *Store) SetCursor(id RunID, cursor []byte) (Run, error) {
	c := slices.Clone(cursor)
	return s.updateRun(id, "cursor", func(r *Run) { r.Cursor = c })
}

func (s *Store) updateRun(id RunID, what string, change func(*Run)) (Run, error) {
	end, err := s.begin()
	if err != nil {
		return Run{}, err
	}
	defer end()
	var r Run
	err = s.update("set run", func(tx *bolt.Tx) error {
		var err error
		if r, err = s.readRun(tx, id); err != nil {
			return err
		}
		if r.State.Terminal() {
			return fmt.Errorf("run is %s: %w", r.State, ErrRunEnded)
		}
		change(&r)
		r.Updated = s.opt.Clock.Now()
		return writeRun(tx, r)
	})
	if err != nil {
		return Run{}, fmt.Errorf("set run %s %s: %w", id, what, err)
	}
	s.setRunState(id, r.State)
	return r, nil
}

// Run returns one run.
func (s *Store) Run(id RunID) (Run, error) {
	var r Run
	err := s.view("read run", func(tx *bolt.Tx) error {
		var err error
		r, err = s.readRun(tx, id)
		return err
	})
	return r, err
}

// Runs returns every run, oldest first.
func (s *Store) Runs() ([]Run, error) { return s.listRuns(func(Run) bool { return true }) }

// Unfinished returns the runs not in a terminal state, oldest first: the
// ones to resume (or to close) after a restart.
func (s *Store) Unfinished() ([]Run, error) {
	return s.listRuns(func(r Run) bool { return !r.State.Terminal() })
}

func (s *Store) listRuns(keep func(Run) bool) ([]Run, error) {
	var out []Run
	err := s.view("list runs", func(tx *bolt.Tx) error {
		return tx.Bucket(bucketRuns).ForEachBucket(func(k []byte) error {
			r, err := s.readRun(tx, RunID(binary.BigEndian.Uint64(k)))
			if err != nil {
				return err
			}
			if keep(r) {
				out = append(out, r)
			}
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("list runs: %w", err)
	}
	return out, nil
}

func (s *Store) setRunState(id RunID, st State) {
	s.runsMu.Lock()
	s.runs[id] = st
	s.runsMu.Unlock()
}

// checkRunOpen refuses data for an unknown or ended run, from the cached
// states (no transaction).
func (s *Store) checkRunOpen(id RunID) error {
	s.runsMu.Lock()
	st, ok := s.runs[id]
	s.runsMu.Unlock()
	switch {
	case !ok:
		return fmt.Errorf("run %s: %w", id, ErrNoRun)
	case st.Terminal():
		return fmt.Errorf("run %s is %s: %w", id, st, ErrRunEnded)
	}
	return nil
}

// Retries of FailRun: a state write that fails (a full disk freeing up, a
// slow device) is tried again before the error is returned.
var failRetries = []time.Duration{0, 50 * time.Millisecond, 250 * time.Millisecond, time.Second}

// FailRun ends a run as failed with the reason, retrying a failing write a
// few times over about 1.3 s. A run that has already ended is left as it
// is (ended true, no error). When every attempt fails the error says so:
// the run is still stored unfinished, Put refuses it from now
// on, and CloseUnfinished closes it at the next start.
func (s *Store) FailRun(id RunID, reason string) (r Run, err error) {
	for _, wait := range failRetries {
		time.Sleep(wait)
		r, err = s.SetState(id, StateFailed, reason)
		switch {
		case err == nil:
			return r, nil
		case errors.Is(err, ErrRunEnded):
			return s.Run(id)
		case errors.Is(err, ErrNoRun), errors.Is(err, ErrClosed), errors.Is(err, ErrBadRecord), errors.Is(err, ErrDamaged):
			return Run{}, err
		}
	}
	s.setRunState(id, StateFailed) // refuse further data for it in this process
	return Run{}, fmt.Errorf("fail run %s (%s): %d attempts: %w", id, reason, len(failRetries), err)
}

// CloseUnfinished ends every unfinished run except keep (0 keeps none) as
// failed with the reason, oldest first, and returns the runs it closed. At
// start-up: the newest unfinished run may be resumed, the others are closed.
func (s *Store) CloseUnfinished(keep RunID, reason string) ([]Run, error) {
	open, err := s.Unfinished()
	if err != nil {
		return nil, err
	}
	var closed []Run
	for _, r := range open {
		if r.ID == keep {
			continue
		}
		c, err := s.FailRun(r.ID, reason)
		if err != nil {
			return closed, err
		}
		closed = append(closed, c)
	}
	return closed, nil
}
