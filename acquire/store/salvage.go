package store

import (
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"os"
	"slices"

	bolt "go.etcd.io/bbolt"
)

// SalvageReport counts what Salvage copied and what it could not read.
type SalvageReport struct {
	Runs, Points, Events, Blocks int // records copied
	RunsRebuilt                  int // runs whose own record was lost: stored as failed, with their points and samples
	Lost                         []string
}

// Salvage copies every readable run, point, event and sample block of the
// store at src into a new store at dst (which must not exist), walking the
// file's pages itself so that damaged pages are skipped rather than
// trusted. Records with a bad checksum are left behind and listed. src is
// only read. The new file passes the full check before Salvage returns.
func Salvage(src, dst string) (SalvageReport, error) {
	var rep SalvageReport
	if _, err := os.Stat(dst); err == nil {
		return rep, fmt.Errorf("salvage into %s: the file exists; name a new one", dst)
	}
	f, err := os.Open(src)
	if err != nil {
		return rep, fmt.Errorf("salvage %s: %w", src, err)
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return rep, fmt.Errorf("salvage %s: %w", src, err)
	}
	m, note, err := chooseMetaNote(f, fi.Size(), true)
	if err != nil {
		return rep, fmt.Errorf("salvage %s: %w", src, err)
	}
	if note != "" {
		rep.Lost = append(rep.Lost, note)
	}
	ps := int64(m.pageSize)
	hwm := m.hwm
	if filePages := uint64(fi.Size() / ps); hwm > filePages {
		rep.Lost = append(rep.Lost, fmt.Sprintf("the file ends at page %d of %d: later pages are gone", filePages, hwm))
		hwm = filePages
	}
	c := newCollector()
	w := &walker{f: f, ps: ps, hwm: hwm, used: map[uint64]string{}, rep: &fileReport{}, tolerant: true,
		visit: c.visit, bucket: c.bucket}
	if err := w.bucketPage(m.root, nil, 0); err != nil {
		rep.Lost = append(rep.Lost, err.Error())
	}
	rep.Lost = append(rep.Lost, w.lost...)

	db, err := bolt.Open(dst, 0o600, &bolt.Options{Timeout: 0})
	if err != nil {
		return rep, fmt.Errorf("salvage into %s: %w", dst, err)
	}
	werr := c.write(db, &rep)
	if cerr := db.Close(); werr == nil {
		werr = cerr
	}
	if werr != nil {
		return rep, fmt.Errorf("salvage into %s: %w", dst, werr)
	}
	s, err := Open(dst, Options{StartCheck: CheckFull})
	if err != nil {
		return rep, fmt.Errorf("salvage: the new file does not open: %w", err)
	}
	defer s.Close()
	if err := s.Check(); err != nil {
		return rep, fmt.Errorf("salvage: the new file fails its check: %w", err)
	}
	return rep, nil
}

// collector keeps what the tolerant walk found, by run.
type collector struct {
	runs      map[uint64]*salvagedRun
	runSeq    uint64
	events    map[uint64][]byte
	eventSeq  uint64
	badRecord []string
}

type salvagedRun struct {
	record   []byte            // JSON, nil when lost
	points   map[string][]byte // key → JSON
	pointSeq uint64
	samples  map[string]map[uint64][]byte // instrument → block key → block
}

func newCollector() *collector {
	return &collector{runs: map[uint64]*salvagedRun{}, events: map[uint64][]byte{}}
}

func (c *collector) run(key string) *salvagedRun {
	if len(key) != 8 {
		return nil
	}
	id := binary.BigEndian.Uint64([]byte(key))
	r := c.runs[id]
	if r == nil {
		r = &salvagedRun{points: map[string][]byte{}, samples: map[string]map[uint64][]byte{}}
		c.runs[id] = r
	}
	return r
}

// record returns the JSON of a stored record: sealed with a good checksum,
// or unsealed JSON (format-1 files) that decodes into v.
func record(val []byte, v any) ([]byte, bool) {
	js, err := unseal(val, true)
	if err != nil || json.Unmarshal(js, v) != nil {
		return nil, false
	}
	return append([]byte(nil), js...), true
}

func (c *collector) visit(path []string, key, val []byte) {
	switch {
	case len(path) == 1 && path[0] == string(bucketEvents):
		var e Event
		if js, ok := record(val, &e); ok && len(key) == 8 {
			c.events[binary.BigEndian.Uint64(key)] = js
			return
		}
	case len(path) == 1 && path[0] == string(bucketMeta):
		return // the new file has its own
	case len(path) == 2 && path[0] == string(bucketRuns) && string(key) == string(keyRun):
		var rec runRecord
		if js, ok := record(val, &rec); ok && rec.State.valid() {
			if r := c.run(path[1]); r != nil {
				r.record = js
				return
			}
		}
	case len(path) == 3 && path[0] == string(bucketRuns) && path[2] == string(bucketPoints):
		var rec pointRecord
		if js, ok := record(val, &rec); ok {
			if r := c.run(path[1]); r != nil {
				r.points[string(key)] = js
				return
			}
		}
	case len(path) == 4 && path[0] == string(bucketRuns) && path[2] == string(bucketSamples) && len(key) == 8:
		k := binary.BigEndian.Uint64(key)
		if decodeBlock(int64(k), val, func(Sample) error { return nil }) == nil {
			if r := c.run(path[1]); r != nil {
				if r.samples[path[3]] == nil {
					r.samples[path[3]] = map[uint64][]byte{}
				}
				r.samples[path[3]][k] = append([]byte(nil), val...)
				return
			}
		}
	}
	name := fmt.Sprintf("record %x", key)
	if len(path) == 3 && path[2] == string(bucketPoints) {
		name = "point " + pointName(key)
	}
	c.badRecord = append(c.badRecord, fmt.Sprintf("%s in bucket /%s: unreadable or its checksum does not match", name, joinPath(path)))
}

func (c *collector) bucket(path []string, seq uint64) {
	switch {
	case len(path) == 1 && path[0] == string(bucketRuns):
		c.runSeq = seq
	case len(path) == 1 && path[0] == string(bucketEvents):
		c.eventSeq = seq
	case len(path) == 2 && path[0] == string(bucketRuns):
		c.run(path[1])
	case len(path) == 3 && path[0] == string(bucketRuns) && path[2] == string(bucketPoints):
		if r := c.run(path[1]); r != nil {
			r.pointSeq = seq
		}
	}
}

// write stores what was collected, one transaction per run and one for
// the events.
func (c *collector) write(db *bolt.DB, rep *SalvageReport) error {
	rep.Lost = append(rep.Lost, c.badRecord...)
	err := db.Update(func(tx *bolt.Tx) error {
		meta, err := tx.CreateBucket(bucketMeta)
		if err != nil {
			return err
		}
		if err := meta.Put(keyFormat, []byte(formatVersion)); err != nil {
			return err
		}
		runs, err := tx.CreateBucket(bucketRuns)
		if err != nil {
			return err
		}
		maxID := c.runSeq
		for id := range c.runs {
			maxID = max(maxID, id)
		}
		return runs.SetSequence(maxID)
	})
	if err != nil {
		return err
	}
	for id, r := range c.runs {
		if err := db.Update(func(tx *bolt.Tx) error { return r.write(tx, id, rep) }); err != nil {
			return fmt.Errorf("run %s: %w", RunID(id), err)
		}
	}
	return db.Update(func(tx *bolt.Tx) error {
		ev, err := tx.CreateBucket(bucketEvents)
		if err != nil {
			return err
		}
		ev.FillPercent = 1
		maxID := c.eventSeq
		for id, js := range c.events {
			if err := ev.Put(u64(id), seal(js)); err != nil {
				return err
			}
			maxID = max(maxID, id)
			rep.Events++
		}
		return ev.SetSequence(maxID)
	})
}

func (r *salvagedRun) write(tx *bolt.Tx, id uint64, rep *SalvageReport) error {
	rb, err := tx.Bucket(bucketRuns).CreateBucket(u64(id))
	if err != nil {
		return err
	}
	js := r.record
	if js == nil {
		rep.RunsRebuilt++
		rep.Lost = append(rep.Lost, fmt.Sprintf("run %s: its own record (label, configuration, state) is lost; stored as failed", RunID(id)))
		js, err = json.Marshal(runRecord{Label: fmt.Sprintf("salvaged run %s", RunID(id)), State: StateFailed,
			Reason: "its record was lost to damage; points and samples salvaged"})
		if err != nil {
			return err
		}
	} else {
		rep.Runs++
	}
	if err := rb.Put(keyRun, seal(js)); err != nil {
		return err
	}
	pts, err := rb.CreateBucket(bucketPoints)
	if err != nil {
		return err
	}
	seq := r.pointSeq
	for k, js := range r.points {
		var rec pointRecord
		if err := json.Unmarshal(js, &rec); err != nil {
			return errors.Join(ErrBadRecord, err)
		}
		seq = max(seq, rec.Seq)
		if err := pts.Put([]byte(k), seal(js)); err != nil {
			return err
		}
		rep.Points++
	}
	if err := pts.SetSequence(seq); err != nil {
		return err
	}
	smp, err := rb.CreateBucket(bucketSamples)
	if err != nil {
		return err
	}
	for inst, blocks := range r.samples {
		b, err := smp.CreateBucket([]byte(inst))
		if err != nil {
			return err
		}
		b.FillPercent = 1
		for _, k := range slices.Sorted(maps.Keys(blocks)) {
			if err := b.Put(u64(k), blocks[k]); err != nil {
				return err
			}
			rep.Blocks++
		}
	}
	return nil
}
