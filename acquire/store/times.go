package store

import (
	"encoding/binary"
	"encoding/json"
	"fmt"
	"path/filepath"
	"time"

	bolt "go.etcd.io/bbolt"
	"golang.org/x/sys/unix"
)

// LastTime returns the latest time stamped anywhere in the store: run
// creation and update times, every event, every point (when stored and the
// end of its windows) and the newest committed block of every sample
// stream (Flush first to include what is queued). A clock
// that resumes after a restart starts from it, so stored times never go
// backwards. Zero when the store holds nothing.
func (s *Store) LastTime() (time.Time, error) {
	var last time.Time
	later := func(t time.Time) {
		if t.After(last) {
			last = t
		}
	}
	err := s.view("last time", func(tx *bolt.Tx) error {
		runs := tx.Bucket(bucketRuns)
		err := runs.ForEachBucket(func(k []byte) error {
			r, err := s.readRun(tx, RunID(binary.BigEndian.Uint64(k)))
			if err != nil {
				return err
			}
			later(r.Created)
			later(r.Updated)
			rb := runs.Bucket(k)
			err = rb.Bucket(bucketPoints).ForEach(func(k, v []byte) error {
				rec, err := s.decodePoint(k, v)
				if err != nil {
					return err
				}
				later(rec.Stored)
				later(rec.Point.Reference.End)
				later(rec.Point.DUT.End)
				return nil
			})
			if err != nil {
				return err
			}
			smp := rb.Bucket(bucketSamples)
			return smp.ForEachBucket(func(inst []byte) error {
				k, v := smp.Bucket(inst).Cursor().Last()
				if k == nil {
					return nil
				}
				return decodeBlock(int64(binary.BigEndian.Uint64(k)), v, func(x Sample) error { later(x.Time); return nil })
			})
		})
		if err != nil {
			return err
		}
		return tx.Bucket(bucketEvents).ForEach(func(k, v []byte) error {
			js, err := unseal(v, s.legacy)
			if err != nil {
				return fmt.Errorf("event %d: %w", binary.BigEndian.Uint64(k), err)
			}
			var e struct {
				Time time.Time `json:"time"`
			}
			if err := json.Unmarshal(js, &e); err != nil {
				return fmt.Errorf("event %d: %w: %v", binary.BigEndian.Uint64(k), ErrBadRecord, err)
			}
			later(e.Time)
			return nil
		})
	})
	if err != nil {
		return time.Time{}, fmt.Errorf("last time in store %s: %w", s.path, err)
	}
	return last, nil
}

// FreeBytes is the space left to an unprivileged writer on the file system
// of the store's file.
func (s *Store) FreeBytes() (uint64, error) {
	var st unix.Statfs_t
	dir := filepath.Dir(s.path)
	if err := unix.Statfs(dir, &st); err != nil {
		return 0, fmt.Errorf("free space for store %s: %w", s.path, err)
	}
	return st.Bavail * uint64(st.Bsize), nil
}
