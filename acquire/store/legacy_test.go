package store

import (
	"encoding/binary"
	"encoding/json"
	"math"
	"path/filepath"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"

	"plateau/analysis"
)

// v1Block encodes samples in the version-1 block layout (block.go) by
// hand, as an older build wrote them.
func v1Block(key int64, unit string, smps []Sample) []byte {
	b := []byte{blockV1, byte(len(unit))}
	b = append(b, unit...)
	last, prevPa, prevRaw := key, uint64(0), uint64(0)
	for _, s := range smps {
		ns := s.Time.UnixNano()
		flags := byte(0)
		if s.Wire != "" {
			flags |= flagWire
		}
		b = append(b, flags)
		b = binary.AppendVarint(b, ns-last)
		last = ns
		b = binary.AppendUvarint(b, math.Float64bits(s.Pa)^prevPa)
		b = binary.AppendUvarint(b, math.Float64bits(s.Raw)^prevRaw)
		prevPa, prevRaw = math.Float64bits(s.Pa), math.Float64bits(s.Raw)
		if s.Wire != "" {
			b = append(b, byte(len(s.Wire)))
			b = append(b, s.Wire...)
		}
	}
	return b
}

// A file of format 1 (unsealed JSON records, version-1 blocks) opens, reads
// back as written, takes new runs, points and samples (sealed, version 2)
// and passes the full check.
func TestFormatOneFilesStillRead(t *testing.T) {
	path := filepath.Join(t.TempDir(), "old.db")
	old := []Sample{
		{Time: t0, Pa: 1600012, Raw: 16.00012, RawUnit: "bar", Wire: "+16.00012"},
		{Time: t0.Add(50 * time.Millisecond), Pa: 1599990, Raw: 15.9999, RawUnit: "bar"},
	}
	p := point(1, analysis.Ascending, analysis.Measurement, 0, 5e5)
	db, err := bolt.Open(path, 0o600, nil)
	if err != nil {
		t.Fatal(err)
	}
	err = db.Update(func(tx *bolt.Tx) error {
		meta, _ := tx.CreateBucket(bucketMeta)
		meta.Put(keyFormat, []byte(formatLegacy))
		runs, _ := tx.CreateBucket(bucketRuns)
		runs.SetSequence(1)
		rb, _ := runs.CreateBucket(u64(1))
		js, _ := json.Marshal(runRecord{Label: "old run", State: StateRunning, Created: t0, Updated: t0})
		rb.Put(keyRun, js)
		pts, _ := rb.CreateBucket(bucketPoints)
		pts.SetSequence(1)
		key, _ := pointKey(p)
		js, _ = json.Marshal(pointRecord{Seq: 1, Stored: t0, Point: p})
		pts.Put(key, js)
		smp, _ := rb.CreateBucket(bucketSamples)
		ref, _ := smp.CreateBucket([]byte("ref"))
		ref.Put(u64(uint64(t0.UnixNano())), v1Block(t0.UnixNano(), "bar", old))
		ev, _ := tx.CreateBucket(bucketEvents)
		ev.SetSequence(1)
		js, _ = json.Marshal(Event{ID: 1, Time: t0, Run: 1, Type: "state", Message: "started"})
		return ev.Put(u64(1), js)
	})
	db.Close()
	if err != nil {
		t.Fatal(err)
	}

	s, err := Open(path, Options{StartCheck: CheckFull})
	if err != nil {
		t.Fatal(err)
	}
	if r, err := s.Run(1); err != nil || r.Label != "old run" {
		t.Fatalf("old run %+v %v", r, err)
	}
	if evs, err := s.Events(0, 10); err != nil || len(evs) != 1 || evs[0].Message != "started" {
		t.Fatalf("old events %+v %v", evs, err)
	}
	newer := Sample{Time: t0.Add(time.Second), Pa: 1600000, Raw: 16, RawUnit: "bar"}
	if err := s.Put(1, "ref", newer); err != nil {
		t.Fatal(err)
	}
	if _, existed, err := s.AddPoint(1, p); err != nil || !existed {
		t.Fatalf("the old point again: existed %v %v", existed, err)
	}
	if _, _, err := s.AddPoint(1, point(1, analysis.Ascending, analysis.Measurement, 1, 1e6)); err != nil {
		t.Fatal(err)
	}
	got := collect(t, s, 1, "ref", time.Time{}, time.Time{})
	want := append(old, newer)
	if len(got) != len(want) {
		t.Fatalf("%d samples, want %d", len(got), len(want))
	}
	for i := range want {
		if !got[i].Time.Equal(want[i].Time) || !same(got[i].Pa, want[i].Pa) || !same(got[i].Raw, want[i].Raw) || got[i].Wire != want[i].Wire {
			t.Errorf("sample %d: %+v, want %+v", i, got[i], want[i])
		}
	}
	if err := s.Check(); err != nil {
		t.Fatal(err)
	}
	s.Close()
	checkFile(t, path)
}
