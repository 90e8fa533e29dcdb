package store

import (
	"fmt"
	"runtime/debug"

	bolt "go.etcd.io/bbolt"
)

// guarded runs f, turning a panic inside it (bbolt panics on some damaged
// pages, and a fault on a mapped page becomes a panic with SetPanicOnFault)
// into an error naming the file. bbolt's View and Update roll their
// transaction back on a panic, so the store stays usable for other calls.
func guarded(path, what string, f func() error) (err error) {
	old := debug.SetPanicOnFault(true)
	defer debug.SetPanicOnFault(old)
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("%s %s: bbolt failed on the file's pages (%v): %w", what, path, r, ErrDamaged)
		}
	}()
	return f()
}

func (s *Store) guard(what string, f func() error) error { return guarded(s.path, what, f) }

// view and update are bbolt's View and Update under the guard, holding
// dbMu for reading so that the writer's reopen (reopen.go) finds no
// transaction in flight.
func (s *Store) view(what string, fn func(*bolt.Tx) error) error {
	return s.withDB(what, func(db *bolt.DB) error { return db.View(fn) })
}

func (s *Store) update(what string, fn func(*bolt.Tx) error) error {
	return s.withDB(what, func(db *bolt.DB) error { return db.Update(fn) })
}

func (s *Store) withDB(what string, f func(*bolt.DB) error) error {
	s.dbMu.RLock()
	defer s.dbMu.RUnlock()
	if s.db == nil {
		return fmt.Errorf("%s: %w", what, s.dbErr)
	}
	return s.guard(what, func() error { return f(s.db) })
}
