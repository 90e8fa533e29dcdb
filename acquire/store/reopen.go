package store

import (
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"
)

// reopenPages is how many pages of data the writer commits between two
// reopens of the file (4 MiB of 4 KiB pages).
//
// Why reopen at all: bbolt's freelist keeps a map entry, naming the
// transaction that took it, for every page it hands out again from the
// free pages, for as long as that page stays in use; the entries go only
// when the file is closed. An append-only store keeps nearly every page
// it writes, so a daemon that ran for weeks without a restart would carry
// one entry per page of its samples (measured: about 0.2 MB ten hours into
// a four-device run, and the runtime's heap goal grows by twice that).
// Closing and opening the file drops them; a run does not notice.
const reopenPages = 1024

// livePages is the number of pages holding data: the file's pages below
// its high-water mark less the free and pending ones.
func livePages(db *bolt.DB, highWater int64) int {
	st := db.Stats()
	return int(highWater/int64(db.Info().PageSize)) - st.FreePageN - st.PendingPageN
}

// startTracking records the live pages of a freshly opened file.
func (s *Store) startTracking() error {
	return s.guard("count pages", func() error {
		return s.db.View(func(tx *bolt.Tx) error {
			s.liveAtOpen = livePages(s.db, tx.Size())
			return nil
		})
	})
}

// reopenIfDue closes and reopens the file once the writer has committed
// reopenPages pages since it was opened, or when an earlier reopen
// failed. It runs in the writer goroutine between commits and never
// waits: while any transaction is in flight it leaves the reopen to a
// later commit, so the writer is never held up by a reader, however long
// that reader takes.
func (s *Store) reopenIfDue(highWater int64) {
	if s.db != nil && (s.closing.Load() || livePages(s.db, highWater)-s.liveAtOpen < s.opt.reopenPages) {
		return
	}
	if !s.dbMu.TryLock() {
		return
	}
	defer s.dbMu.Unlock()
	s.reopenLocked()
}

// reopenLocked closes the file (if open) and opens it again; dbMu is held.
// A file that cannot be opened again leaves the store without one: every
// call then fails with the reason, a store fault that pauses and vents a
// run, and the writer tries again at each commit.
func (s *Store) reopenLocked() {
	if s.db != nil {
		err := s.guard("close for reopen", s.db.Close)
		s.db = nil
		if err != nil {
			s.dbErr = fmt.Errorf("store %s was closed to be reopened and the close failed: %w", s.path, err)
			return
		}
	}
	// Another process can take the file's lock only in the instant
	// between close and open; readers and writers wait for this call, so
	// it does not wait long for that process to let go.
	o := s.opt
	o.Timeout = min(o.Timeout, 100*time.Millisecond)
	db, err := reopenBolt(s.path, o)
	if err != nil {
		s.dbErr = fmt.Errorf("store %s was closed to be reopened and could not be opened again: %w", s.path, err)
		return
	}
	s.db, s.dbErr = db, nil
	if err := s.startTracking(); err != nil {
		s.liveAtOpen = 0 // counted from zero: the next reopen comes early, not late
	}
	s.status.set(func(w *WriterStatus) { w.Reopens++ })
}

// reopenBolt opens the file again; a variable so that a test can make the
// reopen fail.
var reopenBolt = openBolt
