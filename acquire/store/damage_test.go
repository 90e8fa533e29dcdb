package store

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"errors"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"

	"plateau/analysis"
)

// healthyStore writes a store with two runs, points, events and enough
// samples for sample buckets of several pages, closes it and returns its
// path and what its pages are used for.
func healthyStore(t *testing.T) (string, fileReport) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "healthy.db")
	s, err := Open(path, Options{WireEvery: 1})
	if err != nil {
		t.Fatal(err)
	}
	for r := range 2 {
		run, err := s.CreateRun("bench 3, gauge 1234", []byte("points: [0, 5, 10]\n"))
		if err != nil {
			t.Fatal(err)
		}
		ingest(t, s, run.ID, 30_000, 0)
		if _, _, err := s.AddPoint(run.ID, point(1, analysis.Ascending, analysis.Measurement, 0, 5e5)); err != nil {
			t.Fatal(err)
		}
		if _, err := s.AddEvent(Event{Run: run.ID, Level: slog.LevelInfo, Type: "state", Message: "run started"}); err != nil {
			t.Fatal(err)
		}
		if r == 0 {
			if _, err := s.SetState(run.ID, StateFinished, "done"); err != nil {
				t.Fatal(err)
			}
		}
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	rep, err := inspectFile(path, false)
	if err != nil {
		t.Fatal(err)
	}
	return path, rep
}

// pageOf finds the first page of the given type used by the bucket named
// exactly owner (e.g. `bucket /"runs"/r000001/"samples"/"dut"`), or with
// last the leaf page holding its greatest key: bbolt reuses freed pages, so
// the newest block need not sit on the highest page number.
func pageOf(t *testing.T, b []byte, rep fileReport, owner string, flags uint16, last bool) int64 {
	t.Helper()
	ps := int64(rep.meta.pageSize)
	var found int64 = -1
	var greatest []byte
	for p := uint64(2); p < rep.meta.hwm; p++ {
		if rep.owner[p] == owner && binary.LittleEndian.Uint16(b[int64(p)*ps+8:]) == flags {
			if !last {
				found = int64(p)
				break
			}
			if k := lastKey(b, int64(p), ps); found < 0 || bytes.Compare(k, greatest) > 0 {
				found, greatest = int64(p), k
			}
		}
	}
	if found < 0 {
		t.Fatalf("no page of type %#x of %s", flags, owner)
	}
	return found
}

// lastKey is the key of a leaf page's last element.
func lastKey(b []byte, page, ps int64) []byte {
	le := binary.LittleEndian
	n := int64(le.Uint16(b[page*ps+10:]))
	if n == 0 {
		return nil
	}
	e := page*ps + 16 + (n-1)*16
	pos, ks := int64(le.Uint32(b[e+4:])), int64(le.Uint32(b[e+8:]))
	return b[e+pos : e+pos+ks]
}

// valueIn is the offset in the file of the middle of the value of a leaf
// page's element i (-1: the last).
func valueIn(b []byte, page, ps int64, i int) int64 {
	le := binary.LittleEndian
	n := int(le.Uint16(b[page*ps+10:]))
	if i < 0 {
		i = n - 1
	}
	e := page*ps + 16 + int64(i)*16
	pos, ks, vs := int64(le.Uint32(b[e+4:])), int64(le.Uint32(b[e+8:])), int64(le.Uint32(b[e+12:]))
	return e + pos + ks + vs/2
}

const (
	refSamples1 = `bucket /"runs"/r000001/"samples"/"reference"`
	dutSamples2 = `bucket /"runs"/r000002/"samples"/"dut"`
)

func hashFile(t *testing.T, path string) [32]byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return sha256.Sum256(b)
}

// At least 15 kinds of damage: Open (the daemon's bounded check) and the
// read-only full check both give an error naming the file and what is
// wrong, never a panic; the full check never passes a damaged file, and the
// read-only open leaves the file byte-identical.
func TestDamageIsFoundNeverServed(t *testing.T) {
	healthy, rep := healthyStore(t)
	ps := int64(rep.meta.pageSize)
	orig, err := os.ReadFile(healthy)
	if err != nil {
		t.Fatal(err)
	}
	at := func(b []byte, off int64, f func(byte) byte) { b[off] = f(b[off]) }
	flip := func(b byte) byte { return b ^ 0x5A }
	// find returns the offset of the nth occurrence of s in a page in use
	// (freed pages keep old copies of records).
	find := func(b []byte, s string, nth int) int64 {
		for i := 0; ; i++ {
			j := bytes.Index(b[i:], []byte(s))
			if j < 0 {
				t.Fatalf("%q not in the file", s)
			}
			i += j
			if o := rep.owner[uint64(int64(i)/ps)]; o != "" && o != "free" {
				if nth--; nth == 0 {
					return int64(i)
				}
			}
		}
	}
	hwm := int(rep.meta.hwm) * int(ps)
	cases := []struct {
		name   string
		damage func(b []byte) []byte
		want   string // in both errors
		// bounded is false when the bounded check at open cannot see
		// this damage (inside an older sample block); the full check must.
		bounded bool
	}{
		{"empty file", func([]byte) []byte { return nil }, "empty", true},
		{"text file", func([]byte) []byte { return bytes.Repeat([]byte("not a store "), 500) }, "not a plateau store", true},
		{"truncated to 1000 bytes", func(b []byte) []byte { return b[:1000] }, "truncated", true},
		{"truncated to two pages", func(b []byte) []byte { return b[:2*ps] }, "truncated", true},
		{"truncated to half the pages in use", func(b []byte) []byte { return b[:hwm/2/int(ps)*int(ps)] }, "truncated", true},
		{"truncated inside the last page in use", func(b []byte) []byte { return b[:hwm-1] }, "truncated", true},
		{"meta page 0 flipped", func(b []byte) []byte { at(b, 16+20, flip); return b }, "meta page 0 is damaged", true},
		{"meta page 1 flipped", func(b []byte) []byte { at(b, ps+16+40, flip); return b }, "meta page 1 is damaged", true},
		{"both meta pages flipped", func(b []byte) []byte { at(b, 16+8, flip); at(b, ps+16+8, flip); return b }, "both meta pages", true},
		{"freelist page overwritten", func(b []byte) []byte {
			copy(b[int64(rep.meta.freelist)*ps+8:], []byte{0x02, 0})
			return b
		}, "freelist page", true},
		{"root page flags", func(b []byte) []byte { at(b, int64(rep.meta.root)*ps+8, flip); return b }, "want a branch or leaf page", true},
		{"page zeroed", func(b []byte) []byte {
			p := pageOf(t, b, rep, refSamples1, flagLeaf, false)
			clear(b[p*ps : (p+1)*ps])
			return b
		}, "calls itself page 0", true},
		{"page copied over another", func(b []byte) []byte {
			p := pageOf(t, b, rep, refSamples1, flagLeaf, false)
			q := pageOf(t, b, rep, dutSamples2, flagLeaf, false)
			copy(b[q*ps:(q+1)*ps], b[p*ps:(p+1)*ps])
			return b
		}, "calls itself", true},
		{"branch child out of range", func(b []byte) []byte {
			for p := int64(2); p < int64(rep.meta.hwm); p++ {
				if binary.LittleEndian.Uint16(b[p*ps+8:]) == flagBranch && rep.owner[uint64(p)] != "free" {
					binary.LittleEndian.PutUint64(b[p*ps+16+8:], 1<<40)
					return b
				}
			}
			t.Fatal("no branch page")
			return b
		}, "outside the pages in use", true},
		{"leaf element outside its page", func(b []byte) []byte {
			binary.LittleEndian.PutUint32(b[int64(rep.meta.root)*ps+16+4:], 1<<20)
			return b
		}, "outside the page", true},
		{"a digit changed inside a point", func(b []byte) []byte {
			i := find(b, "500003.25", 1) // the point's reference mean
			b[i+2] = '9'
			return b
		}, "checksum", true},
		{"a byte changed inside a run record", func(b []byte) []byte {
			b[find(b, "gauge 1234", 1)+6] = '9'
			return b
		}, "checksum", true},
		{"a byte changed inside an event", func(b []byte) []byte {
			b[find(b, "run started", 2)] = 'R'
			return b
		}, "checksum", true},
		{"a byte changed in the newest sample block", func(b []byte) []byte {
			p := pageOf(t, b, rep, dutSamples2, flagLeaf, true)
			b[valueIn(b, p, ps, -1)] ^= 0x10
			return b
		}, "checksum", true},
		{"a byte changed in an old sample block", func(b []byte) []byte {
			p := pageOf(t, b, rep, refSamples1, flagLeaf, false)
			b[valueIn(b, p, ps, 0)] ^= 0x10
			return b
		}, "checksum", false},
	}
	if len(cases) < 15 {
		t.Fatalf("only %d kinds of damage", len(cases))
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "damaged.db")
			if err := os.WriteFile(path, tc.damage(bytes.Clone(orig)), 0o600); err != nil {
				t.Fatal(err)
			}
			before := hashFile(t, path)
			ro, err := Open(path, Options{ReadOnly: true, StartCheck: CheckFull})
			if err == nil {
				err = ro.Check()
				ro.Close()
			}
			if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.Contains(err.Error(), path) {
				t.Errorf("full check: %v\nwant an error with %q and the file name", err, tc.want)
			}
			if hashFile(t, path) != before {
				t.Error("the read-only check changed the file")
			}
			s, err := Open(path, Options{})
			if err == nil {
				s.Close()
				if tc.bounded {
					t.Fatal("the bounded check at open served a damaged file")
				}
				return
			}
			if !tc.bounded && !strings.Contains(err.Error(), tc.want) {
				t.Logf("bounded check found more than it promises: %v", err)
			}
			if !strings.Contains(err.Error(), path) || !(errors.Is(err, ErrDamaged) || errors.Is(err, ErrWrongFile)) {
				t.Errorf("open: %v", err)
			}
			if errors.Is(err, ErrDamaged) && !strings.Contains(err.Error(), "plateau salvage --store "+path) {
				t.Errorf("open does not say how to salvage: %v", err)
			}
		})
	}
	checkFile(t, healthy)
}

// Salvage copies what can be read from a damaged file into a new one,
// which passes the full check; the source stays byte-identical.
func TestSalvage(t *testing.T) {
	healthy, rep := healthyStore(t)
	ps := int64(rep.meta.pageSize)
	orig, _ := os.ReadFile(healthy)
	for _, tc := range []struct {
		name       string
		damage     func([]byte) []byte
		wantPoints int
		lost       bool
	}{
		{"healthy", func(b []byte) []byte { return b }, 2, false},
		{"a digit changed inside a point", func(b []byte) []byte {
			for i := 0; ; i++ { // the first copy in a page in use
				i += bytes.Index(b[i:], []byte("500003.25"))
				if o := rep.owner[uint64(int64(i)/ps)]; o != "" && o != "free" {
					b[i+2] = '9'
					return b
				}
			}
		}, 1, true},
		{"meta page 0 flipped", func(b []byte) []byte { b[16+20] ^= 0x5A; return b }, 2, true},
		// The newest pages are at the end of the file: cut in half, the
		// tree loses its top and little can be copied; nothing must fail.
		{"truncated to half the pages in use", func(b []byte) []byte { return b[:int(rep.meta.hwm)/2*int(ps)] }, -1, true},
		{"truncated inside the last page in use", func(b []byte) []byte { return b[:int(rep.meta.hwm)*int(ps)-100] }, -1, true},
		{"an old sample block damaged", func(b []byte) []byte {
			p := pageOf(t, b, rep, refSamples1, flagLeaf, false)
			b[valueIn(b, p, ps, 0)] ^= 0x10
			return b
		}, 2, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			src, dst := filepath.Join(dir, "damaged.db"), filepath.Join(dir, "saved.db")
			if err := os.WriteFile(src, tc.damage(bytes.Clone(orig)), 0o600); err != nil {
				t.Fatal(err)
			}
			before := hashFile(t, src)
			got, err := Salvage(src, dst)
			if err != nil {
				t.Fatal(err)
			}
			if hashFile(t, src) != before {
				t.Error("salvage changed its source")
			}
			if (len(got.Lost) > 0) != tc.lost {
				t.Errorf("lost %q", got.Lost)
			}
			if tc.wantPoints >= 0 && got.Points != tc.wantPoints {
				t.Errorf("%d points salvaged, want %d (%+v)", got.Points, tc.wantPoints, got)
			}
			s, err := Open(dst, Options{StartCheck: CheckFull})
			if err != nil {
				t.Fatal(err)
			}
			defer s.Close()
			if err := s.Check(); err != nil {
				t.Fatal(err)
			}
			runs, err := s.Runs()
			if err != nil || (tc.wantPoints >= 0 && len(runs) != 2) {
				t.Fatalf("runs %v %v", runs, err)
			}
			t.Logf("salvaged %d runs (%d rebuilt), %d points, %d events, %d blocks; %d problems", got.Runs, got.RunsRebuilt, got.Points, got.Events, got.Blocks, len(got.Lost))
			if tc.name == "healthy" {
				if got.Blocks == 0 || got.Events != 2 || got.Runs != 2 {
					t.Errorf("healthy salvage %+v", got)
				}
				n := len(collect(t, s, 1, "reference", time.Time{}, time.Time{}))
				if n != 15_000 {
					t.Errorf("%d reference samples of run 1 salvaged, want 15000", n)
				}
				// The salvaged store goes on: the next run gets the next id.
				if r, err := s.CreateRun("after salvage", nil); err != nil || r.ID != 3 {
					t.Errorf("next run %v %v", r.ID, err)
				}
			}
			if _, err := Salvage(src, dst); err == nil || !strings.Contains(err.Error(), "exists") {
				t.Errorf("salvage over an existing file: %v", err)
			}
		})
	}
	checkFile(t, healthy)
}

// A bbolt file of another program is refused, not adopted.
func TestOpenRefusesOtherBoltFiles(t *testing.T) {
	path := filepath.Join(t.TempDir(), "other.db")
	db, err := bolt.Open(path, 0o600, nil)
	if err != nil {
		t.Fatal(err)
	}
	if err := db.Update(func(tx *bolt.Tx) error { _, err := tx.CreateBucket([]byte("widgets")); return err }); err != nil {
		t.Fatal(err)
	}
	db.Close()
	before := hashFile(t, path)
	for _, ro := range []bool{false, true} {
		if s, err := Open(path, Options{ReadOnly: ro}); !errors.Is(err, ErrWrongFile) {
			if err == nil {
				s.Close()
			}
			t.Errorf("read-only %v: %v", ro, err)
		}
	}
	if hashFile(t, path) != before {
		t.Error("refusing the file changed it")
	}
	db, err = bolt.Open(path, 0o600, &bolt.Options{ReadOnly: true})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	db.View(func(tx *bolt.Tx) error {
		for err := range tx.Check() {
			t.Errorf("consistency check: %v", err)
		}
		return nil
	})
}

// FuzzOpenFile opens arbitrary bytes as a store — read-only with the full
// check, for writing with the bounded check, and through Salvage: each
// gives a store or an error, never a panic or a hang.
func FuzzOpenFile(f *testing.F) {
	dir := f.TempDir()
	seed := filepath.Join(dir, "seed.db")
	s, err := Open(seed, Options{WireEvery: 1})
	if err != nil {
		f.Fatal(err)
	}
	run, _ := s.CreateRun("fuzz", []byte("a: 1\n"))
	for i := range 300 {
		s.Put(run.ID, "ref", Sample{Time: t0.Add(time.Duration(i) * time.Second), Raw: float64(i) / 100, Pa: float64(i) * 1e3, RawUnit: "bar", Wire: "x"})
	}
	s.AddPoint(run.ID, point(1, analysis.Ascending, analysis.Measurement, 0, 0))
	s.AddEvent(Event{Type: "note", Message: "seed"})
	s.Close()
	b, err := os.ReadFile(seed)
	if err != nil {
		f.Fatal(err)
	}
	f.Add(b)
	f.Add(b[:4096*3])
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, data []byte) {
		dir := t.TempDir()
		path := filepath.Join(dir, "f.db")
		if err := os.WriteFile(path, data, 0o600); err != nil {
			t.Fatal(err)
		}
		if s, err := Open(path, Options{ReadOnly: true, StartCheck: CheckPagesOnly}); err == nil {
			s.Check()
			s.Close()
		}
		if _, err := Salvage(path, filepath.Join(dir, "saved.db")); err != nil && strings.Contains(err.Error(), "new file") {
			t.Fatalf("salvage wrote a store that fails its own check: %v", err)
		}
		if s, err := Open(path, Options{Timeout: time.Second}); err == nil {
			s.Close()
		}
	})
}

// A bbolt file with nothing in it (a store whose creation was cut short
// after bbolt wrote its meta pages) is taken as a new store.
func TestOpenTakesAnEmptyBoltFile(t *testing.T) {
	path := filepath.Join(t.TempDir(), "cut.db")
	db, err := bolt.Open(path, 0o600, nil)
	if err != nil {
		t.Fatal(err)
	}
	db.Close()
	s, err := Open(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.CreateRun("after a cut-short creation", nil); err != nil {
		t.Fatal(err)
	}
	s.Close()
	checkFile(t, path)
}
