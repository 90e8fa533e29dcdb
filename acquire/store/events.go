package store

import (
	"encoding/binary"
	"encoding/json"
	"fmt"
	"log/slog"
	"math"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Event is one entry of the run log that engineers tail. IDs increase by one
// per stored event across the whole store, in commit order, so a reader that
// resumes from the last id it saw misses nothing.
type Event struct {
	ID         uint64          `json:"id"`
	Time       time.Time       `json:"time"`
	Run        RunID           `json:"run,omitempty"` // 0 = not tied to a run
	Level      slog.Level      `json:"level"`
	Instrument string          `json:"instrument,omitempty"`
	Type       string          `json:"type"` // short machine word: "point", "state", "read_error", "settle", …
	Message    string          `json:"message"`
	Data       json.RawMessage `json:"data,omitempty"` // optional JSON detail
}

func (s *Store) prepareEvent(e Event) (Event, error) {
	if e.Type == "" {
		return e, fmt.Errorf("event %q: type is empty (%w)", e.Message, ErrBadInput)
	}
	if len(e.Data) > 0 && !json.Valid(e.Data) {
		return e, fmt.Errorf("event %s %q: data is not valid JSON (%w)", e.Type, e.Message, ErrBadInput)
	}
	if e.Time.IsZero() {
		e.Time = s.opt.Clock.Now()
	}
	e.ID = 0
	return e, nil
}

// putEvent stores e with the next id, inside the caller's transaction.
func putEvent(tx *bolt.Tx, e *Event) error {
	b := tx.Bucket(bucketEvents)
	id, err := b.NextSequence()
	if err != nil {
		return err
	}
	e.ID = id
	v, err := json.Marshal(e)
	if err != nil {
		return fmt.Errorf("event %s: %w", e.Type, err)
	}
	b.FillPercent = 1.0 // append-only
	return b.Put(u64(id), seal(v))
}

// AddEvent commits one event before it returns and gives its id. A zero
// Time is stamped with the store's clock.
func (s *Store) AddEvent(e Event) (uint64, error) {
	e, err := s.prepareEvent(e)
	if err != nil {
		return 0, err
	}
	end, err := s.begin()
	if err != nil {
		return 0, err
	}
	defer end()
	if err := s.update("add event", func(tx *bolt.Tx) error { return putEvent(tx, &e) }); err != nil {
		return 0, fmt.Errorf("add event %s: %w", e.Type, err)
	}
	return e.ID, nil
}

// QueueEvent hands an event to the writer goroutine, to be committed with
// the next batch of samples; meant for frequent events such as read errors.
// committed, when not nil, is called from the writer goroutine after the
// commit, with the id filled in or the commit error; it must not block long
// and must not call Flush, AddPoint (which flushes first) or Close.
func (s *Store) QueueEvent(e Event, committed func(Event, error)) error {
	e, err := s.prepareEvent(e)
	if err != nil {
		return err
	}
	return s.enqueue(job{event: &e, committed: committed})
}

// Events returns up to limit events with ids greater than since, oldest
// first. limit ≤ 0 means 1000.
func (s *Store) Events(since uint64, limit int) ([]Event, error) {
	if limit <= 0 {
		limit = 1000
	}
	if since == math.MaxUint64 {
		return nil, nil
	}
	var out []Event
	err := s.view("read events", func(tx *bolt.Tx) error {
		c := tx.Bucket(bucketEvents).Cursor()
		for k, v := c.Seek(u64(since + 1)); k != nil && len(out) < limit; k, v = c.Next() {
			e, err := s.decodeEvent(k, v)
			if err != nil {
				return err
			}
			out = append(out, e)
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("events since %d: %w", since, err)
	}
	return out, nil
}

// LastEventID returns the id of the newest stored event (0 if none).
func (s *Store) LastEventID() (uint64, error) {
	var id uint64
	err := s.view("last event", func(tx *bolt.Tx) error {
		id = tx.Bucket(bucketEvents).Sequence()
		return nil
	})
	return id, err
}

func (s *Store) decodeEvent(k, v []byte) (Event, error) {
	var e Event
	js, err := unseal(v, s.legacy)
	if err != nil {
		return e, fmt.Errorf("event %d: %w", binary.BigEndian.Uint64(k), err)
	}
	if err := json.Unmarshal(js, &e); err != nil {
		return e, fmt.Errorf("event %d: %w: %v", binary.BigEndian.Uint64(k), ErrBadRecord, err)
	}
	return e, nil
}
