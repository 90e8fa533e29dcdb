package store

import (
	"encoding/binary"
	"fmt"

	bolt "go.etcd.io/bbolt"
)

// checkContent decodes the store's records in one read transaction: every
// run and point; the newest 1000 events and the newest block of each
// sample stream (bounded), or every event and block (full). The first
// problem is returned.
func (s *Store) checkContent(depth CheckDepth) error {
	return s.view("check", func(tx *bolt.Tx) error {
		runs := tx.Bucket(bucketRuns)
		if runs == nil || tx.Bucket(bucketEvents) == nil {
			return fmt.Errorf("no runs or events bucket: %w", ErrWrongFile)
		}
		err := runs.ForEachBucket(func(k []byte) error {
			if len(k) != 8 {
				return fmt.Errorf("run key %x is not 8 bytes: %w", k, ErrDamaged)
			}
			id := RunID(binary.BigEndian.Uint64(k))
			if _, err := s.readRun(tx, id); err != nil {
				return err
			}
			rb := runs.Bucket(k)
			pts, smp := rb.Bucket(bucketPoints), rb.Bucket(bucketSamples)
			if pts == nil || smp == nil {
				return fmt.Errorf("run %s: no points or samples bucket: %w", id, ErrDamaged)
			}
			if err := pts.ForEach(func(k, v []byte) error { _, err := s.decodePoint(k, v); return err }); err != nil {
				return fmt.Errorf("run %s: %w", id, err)
			}
			return smp.ForEachBucket(func(inst []byte) error {
				if err := checkBlocks(smp.Bucket(inst), depth == CheckFull); err != nil {
					return fmt.Errorf("run %s, samples of %s: %w", id, inst, err)
				}
				return nil
			})
		})
		if err != nil {
			return err
		}
		c := tx.Bucket(bucketEvents).Cursor()
		n := 0
		for k, v := c.Last(); k != nil && (depth == CheckFull || n < 1000); k, v = c.Prev() {
			if _, err := s.decodeEvent(k, v); err != nil {
				return err
			}
			n++
		}
		return nil
	})
}

// checkBlocks decodes every block of a sample bucket (all), or its newest.
func checkBlocks(b *bolt.Bucket, all bool) error {
	c := b.Cursor()
	k, v := c.Last()
	if all {
		k, v = c.First()
	}
	for ; k != nil; k, v = c.Next() {
		if len(k) != 8 {
			return fmt.Errorf("block key %x is not 8 bytes: %w", k, ErrDamaged)
		}
		if err := decodeBlock(int64(binary.BigEndian.Uint64(k)), v, func(Sample) error { return nil }); err != nil {
			return err
		}
		if !all {
			return nil
		}
	}
	return nil
}
