package store

import (
	"cmp"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"time"

	bolt "go.etcd.io/bbolt"

	"plateau/analysis"
)

type pointRecord struct {
	Seq    uint64         `json:"seq"`
	Stored time.Time      `json:"stored"`
	Point  analysis.Point `json:"point"`
}

// pointKey is deterministic in (cycle, kind, direction, index, device), so an engine
// that restarts and captures the same step again finds the earlier point.
// Strings are length-prefixed so no two field combinations share a key.
func pointKey(p analysis.Point) ([]byte, error) {
	bad := func(what string) error {
		return fmt.Errorf("point cycle %d %s %s index %d: %s (%w)", p.Cycle, p.Direction, p.Kind, p.Index, what, ErrBadInput)
	}
	switch {
	case p.Cycle < 0 || p.Cycle > math.MaxUint32:
		return nil, bad("cycle out of range")
	case p.Index < 0 || p.Index > math.MaxUint32:
		return nil, bad("index out of range")
	case p.Kind == "":
		return nil, bad("kind is empty")
	case len(p.Kind) > 255 || len(p.Direction) > 255 || len(p.Device) > 255:
		return nil, bad("kind, direction or device longer than 255 bytes")
	}
	k := binary.BigEndian.AppendUint32(nil, uint32(p.Cycle))
	k = append(append(k, byte(len(p.Kind))), p.Kind...)
	k = append(append(k, byte(len(p.Direction))), p.Direction...)
	k = binary.BigEndian.AppendUint32(k, uint32(p.Index))
	// Several devices in one run: the device is part of the identity. A
	// point of a run with one device has no suffix, as before.
	if p.Device != "" {
		k = append(append(k, byte(len(p.Device))), p.Device...)
	}
	return k, nil
}

// AddPoint commits a captured point before it returns. The point's identity
// is (Cycle, Kind, Direction, Index): if the run already holds a point with
// that identity the stored one is kept unchanged and existed is true, with
// its original sequence number. seq numbers points in capture order.
func (s *Store) AddPoint(run RunID, p analysis.Point) (seq uint64, existed bool, err error) {
	key, err := pointKey(p)
	if err != nil {
		return 0, false, fmt.Errorf("add point to run %s: %w", run, err)
	}
	if err := checkFinite(p); err != nil {
		return 0, false, fmt.Errorf("add point to run %s: %w", run, err)
	}
	// Nothing captured without its samples: the samples queued so far
	// (those of the point's windows among them) must be committed first.
	if !s.opt.ReadOnly {
		if err := s.Flush(); err != nil {
			return 0, false, fmt.Errorf("add point cycle %d %s %s index %d to run %s: its samples are not committed: %w",
				p.Cycle, p.Direction, p.Kind, p.Index, run, err)
		}
	}
	end, err := s.begin()
	if err != nil {
		return 0, false, err
	}
	defer end()
	err = s.update("add point", func(tx *bolt.Tx) error {
		r, err := s.readRun(tx, run)
		if err != nil {
			return err
		}
		if r.State.Terminal() {
			return fmt.Errorf("run is %s: %w", r.State, ErrRunEnded)
		}
		pts := tx.Bucket(bucketRuns).Bucket(u64(uint64(run))).Bucket(bucketPoints)
		if old := pts.Get(key); old != nil {
			rec, err := s.decodePoint(key, old)
			if err != nil {
				return err
			}
			seq, existed = rec.Seq, true
			return nil
		}
		if seq, err = pts.NextSequence(); err != nil {
			return err
		}
		v, err := json.Marshal(pointRecord{Seq: seq, Stored: s.opt.Clock.Now(), Point: p})
		if err != nil {
			return err
		}
		return pts.Put(key, seal(v))
	})
	if err != nil {
		return 0, false, fmt.Errorf("add point cycle %d %s %s index %d to run %s: %w", p.Cycle, p.Direction, p.Kind, p.Index, run, err)
	}
	return seq, existed, nil
}

func checkFinite(p analysis.Point) error {
	for _, f := range []struct {
		name string
		v    float64
	}{
		{"nominal", p.Nominal},
		{"reference mean", p.Reference.Mean}, {"reference SD", p.Reference.StdDev}, {"reference slope", p.Reference.Slope},
		{"DUT mean", p.DUT.Mean}, {"DUT SD", p.DUT.StdDev}, {"DUT slope", p.DUT.Slope},
	} {
		if math.IsNaN(f.v) || math.IsInf(f.v, 0) {
			return fmt.Errorf("%s is %v (%w)", f.name, f.v, ErrBadInput)
		}
	}
	return nil
}

// Points returns the run's points in capture order.
func (s *Store) Points(run RunID) ([]analysis.Point, error) {
	var recs []pointRecord
	err := s.view("read points", func(tx *bolt.Tx) error {
		if _, err := runBucket(tx, run); err != nil {
			return err
		}
		return tx.Bucket(bucketRuns).Bucket(u64(uint64(run))).Bucket(bucketPoints).ForEach(func(k, v []byte) error {
			rec, err := s.decodePoint(k, v)
			if err != nil {
				return err
			}
			recs = append(recs, rec)
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("points of run %s: %w", run, err)
	}
	slices.SortFunc(recs, func(a, b pointRecord) int { return cmp.Compare(a.Seq, b.Seq) })
	out := make([]analysis.Point, len(recs))
	for i, r := range recs {
		out[i] = r.Point
	}
	return out, nil
}

func (s *Store) decodePoint(key, v []byte) (pointRecord, error) {
	var rec pointRecord
	js, err := unseal(v, s.legacy)
	if err != nil {
		return rec, fmt.Errorf("point %s: %w", pointName(key), err)
	}
	if err := json.Unmarshal(js, &rec); err != nil {
		return rec, fmt.Errorf("point %s: %w: %v", pointName(key), ErrBadRecord, err)
	}
	return rec, nil
}

// pointName reads a point key back for messages: "cycle 1 down measure
// index 2", or the key in hex when it does not parse.
func pointName(k []byte) string {
	r := k
	field := func(n int) []byte {
		if len(r) < n {
			r = nil
			return nil
		}
		f := r[:n]
		r = r[n:]
		return f
	}
	str := func() string {
		n := field(1)
		if n == nil {
			return ""
		}
		return string(field(int(n[0])))
	}
	c := field(4)
	kind, dir := str(), str()
	i := field(4)
	dev := ""
	if len(r) > 0 {
		dev = str()
	}
	if c == nil || i == nil || len(r) != 0 {
		return fmt.Sprintf("key %x", k)
	}
	name := fmt.Sprintf("cycle %d %s %s index %d", binary.BigEndian.Uint32(c), dir, kind, binary.BigEndian.Uint32(i))
	if dev != "" {
		name += " of " + dev
	}
	return name
}
