package store

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
	berrors "go.etcd.io/bbolt/errors"

	"plateau/analysis"
	"plateau/drivers"
	"plateau/drivers/clock"
)

var t0 = time.Date(2026, 3, 14, 22, 0, 0, 0, time.UTC)

// openTest opens a fresh store and registers a cleanup that closes it (if
// the test did not), reopens the file and runs the consistency check: every
// store test ends with a check.
func openTest(t testing.TB, opt Options) (*Store, string) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "plateau.db")
	s, err := Open(path, opt)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := s.Close(); err != nil && !errors.Is(err, ErrClosed) {
			t.Errorf("close: %v", err)
		}
		checkFile(t, path)
	})
	return s, path
}

func checkFile(t testing.TB, path string) {
	t.Helper()
	s, err := Open(path, Options{})
	if err != nil {
		t.Errorf("reopen for check: %v", err)
		return
	}
	defer s.Close()
	if err := s.Check(); err != nil {
		t.Errorf("consistency check: %v", err)
	}
}

func newRun(t testing.TB, s *Store) Run {
	t.Helper()
	r, err := s.CreateRun("bench 3, gauge 1234", []byte("points: [0, 5, 10]\n"))
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func TestOpenFileModeAndOptions(t *testing.T) {
	for _, tc := range []struct {
		mode    os.FileMode
		want    os.FileMode
		wantErr bool
	}{
		{0, 0o600, false},
		{0o600, 0o600, false},
		{0o640, 0o640, false},
		{0o644, 0, true},
		{0o666, 0, true},
	} {
		t.Run(fmt.Sprintf("%#o", tc.mode), func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "p.db")
			s, err := Open(path, Options{Mode: tc.mode})
			if tc.wantErr {
				if err == nil || !errors.Is(err, ErrBadInput) {
					s.Close()
					t.Fatalf("mode %#o accepted: %v", tc.mode, err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			s.Close()
			fi, err := os.Stat(path)
			if err != nil {
				t.Fatal(err)
			}
			if got := fi.Mode().Perm(); got&^tc.want != 0 {
				t.Errorf("file mode %#o, want at most %#o", got, tc.want)
			}
			checkFile(t, path)
		})
	}
}

// A second opener must give up after the timeout instead of hanging.
func TestOpenTimesOutWhenHeld(t *testing.T) {
	s, path := openTest(t, Options{})
	_ = s
	start := time.Now()
	s2, err := Open(path, Options{Timeout: 200 * time.Millisecond})
	if err == nil {
		s2.Close()
		t.Fatal("second open succeeded while the store was held")
	}
	if !errors.Is(err, bolt.ErrTimeout) || !strings.Contains(err.Error(), "another process") {
		t.Errorf("error %v", err)
	}
	if d := time.Since(start); d > 5*time.Second {
		t.Errorf("second open took %v", d)
	}
}

func TestOpenRefusesForeignFiles(t *testing.T) {
	dir := t.TempDir()
	junk := filepath.Join(dir, "junk.db")
	if err := os.WriteFile(junk, bytes.Repeat([]byte("not a database "), 1000), 0o600); err != nil {
		t.Fatal(err)
	}
	if s, err := Open(junk, Options{}); err == nil {
		s.Close()
		t.Error("opened a file of text")
	}
	// A bbolt file of another format version.
	other := filepath.Join(dir, "other.db")
	db, err := bolt.Open(other, 0o600, nil)
	if err != nil {
		t.Fatal(err)
	}
	err = db.Update(func(tx *bolt.Tx) error {
		b, err := tx.CreateBucket(bucketMeta)
		if err != nil {
			return err
		}
		return b.Put(keyFormat, []byte("99"))
	})
	db.Close()
	if err != nil {
		t.Fatal(err)
	}
	if s, err := Open(other, Options{}); !errors.Is(err, ErrWrongFile) {
		if err == nil {
			s.Close()
		}
		t.Errorf("format 99: %v", err)
	}
}

func TestParseRunID(t *testing.T) {
	for _, tc := range []struct {
		in   string
		want RunID
		ok   bool
	}{
		{"r000042", 42, true}, {"r42", 42, true}, {"42", 42, true}, {" r7 ", 7, true},
		{"r1234567", 1234567, true},
		{"", 0, false}, {"r", 0, false}, {"r0", 0, false}, {"x12", 0, false}, {"r-1", 0, false},
	} {
		got, err := ParseRunID(tc.in)
		if (err == nil) != tc.ok || got != tc.want {
			t.Errorf("ParseRunID(%q) = %v, %v", tc.in, got, err)
		}
		if tc.ok && got.String() != fmt.Sprintf("r%06d", tc.want) {
			t.Errorf("String() = %q", got.String())
		}
	}
}

func TestRunLifecycleSurvivesReopen(t *testing.T) {
	clk := clock.NewManual(t0)
	s, path := openTest(t, Options{Clock: clk})
	a := newRun(t, s)
	clk.Advance(time.Minute)
	b, err := s.CreateRun("second", nil)
	if err != nil {
		t.Fatal(err)
	}
	if a.ID != 1 || b.ID != 2 || a.ID.String() != "r000001" || a.State != StatePending || !a.Created.Equal(t0) {
		t.Fatalf("runs %+v %+v", a, b)
	}
	steps := []struct {
		id    RunID
		state State
		ok    bool
	}{
		{a.ID, StateRunning, true},
		{a.ID, StatePaused, true},
		{a.ID, StateRunning, true},
		{a.ID, "exploded", false},
		{b.ID, StateStopped, true},
		{b.ID, StateRunning, false}, // terminal
		{99, StateRunning, false},   // no such run
	}
	for _, st := range steps {
		clk.Advance(time.Second)
		r, err := s.SetState(st.id, st.state, "test")
		if (err == nil) != st.ok {
			t.Fatalf("SetState(%v, %v) = %+v, %v", st.id, st.state, r, err)
		}
		if st.ok && (r.State != st.state || !r.Updated.Equal(clk.Now())) {
			t.Errorf("after SetState: %+v", r)
		}
	}
	if _, err := s.SetState(b.ID, StateRunning, ""); !errors.Is(err, ErrRunEnded) {
		t.Errorf("terminal run: %v", err)
	}
	if _, err := s.SetState(99, StateRunning, ""); !errors.Is(err, ErrNoRun) {
		t.Errorf("missing run: %v", err)
	}
	if _, err := s.SetCursor(a.ID, []byte(`{"cycle":2,"step":5}`)); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}

	s, err = Open(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	un, err := s.Unfinished()
	if err != nil {
		t.Fatal(err)
	}
	if len(un) != 1 || un[0].ID != a.ID || un[0].State != StateRunning || string(un[0].Cursor) != `{"cycle":2,"step":5}` ||
		string(un[0].Config) != "points: [0, 5, 10]\n" || un[0].Label != a.Label {
		t.Fatalf("unfinished after reopen: %+v", un)
	}
	all, err := s.Runs()
	if err != nil || len(all) != 2 || all[1].State != StateStopped || all[1].Reason != "test" {
		t.Fatalf("runs: %+v %v", all, err)
	}
	c, err := s.CreateRun("third", nil)
	if err != nil || c.ID != 3 {
		t.Fatalf("id after reopen: %v %v", c.ID, err)
	}
}

func point(cycle int, dir analysis.Direction, kind analysis.PointKind, index int, nominal float64) analysis.Point {
	w := analysis.Window{Mean: nominal + 3.25, StdDev: 0.5, Count: 300, Start: t0, End: t0.Add(30 * time.Second), Slope: 0.001}
	return analysis.Point{Cycle: cycle, Direction: dir, Kind: kind, Index: index, Nominal: nominal, Reference: w, DUT: w, Note: "n"}
}

func TestPointsAreIdempotent(t *testing.T) {
	s, path := openTest(t, Options{})
	run := newRun(t, s)
	if _, err := s.SetState(run.ID, StateRunning, ""); err != nil {
		t.Fatal(err)
	}
	pts := []analysis.Point{
		point(1, "", analysis.ZeroBefore, 0, 0),
		point(1, analysis.Ascending, analysis.Measurement, 0, 0),
		point(1, analysis.Ascending, analysis.Measurement, 1, 5e5),
		point(1, analysis.Descending, analysis.Measurement, 1, 5e5),
		point(2, analysis.Ascending, analysis.Measurement, 1, 5e5),
	}
	for i, p := range pts {
		seq, existed, err := s.AddPoint(run.ID, p)
		if err != nil || existed || seq != uint64(i+1) {
			t.Fatalf("point %d: seq %d existed %v err %v", i, seq, existed, err)
		}
	}
	// The same identity again (a restarted engine): nothing replaced or added.
	again := pts[2]
	again.Nominal, again.Note = 123, "second capture"
	seq, existed, err := s.AddPoint(run.ID, again)
	if err != nil || !existed || seq != 3 {
		t.Fatalf("repeat: seq %d existed %v err %v", seq, existed, err)
	}
	got, err := s.Points(run.ID)
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != len(pts) {
		t.Fatalf("%d points, want %d", len(got), len(pts))
	}
	for i := range pts {
		a, _ := json.Marshal(got[i])
		b, _ := json.Marshal(pts[i])
		if !bytes.Equal(a, b) {
			t.Errorf("point %d:\n got %s\nwant %s", i, a, b)
		}
	}

	for _, tc := range []struct {
		name string
		run  RunID
		p    analysis.Point
		want error
	}{
		{"negative cycle", run.ID, point(-1, "up", "measure", 0, 0), ErrBadInput},
		{"negative index", run.ID, point(1, "up", "measure", -3, 0), ErrBadInput},
		{"empty kind", run.ID, point(1, "up", "", 0, 0), ErrBadInput},
		{"NaN mean", run.ID, func() analysis.Point { p := point(1, "up", "measure", 7, 0); p.DUT.Mean = math.NaN(); return p }(), ErrBadInput},
		{"no such run", 77, point(1, "up", "measure", 0, 0), ErrNoRun},
	} {
		if _, _, err := s.AddPoint(tc.run, tc.p); !errors.Is(err, tc.want) {
			t.Errorf("%s: %v, want %v", tc.name, err, tc.want)
		}
	}
	if _, err := s.SetState(run.ID, StateFinished, ""); err != nil {
		t.Fatal(err)
	}
	if _, _, err := s.AddPoint(run.ID, point(3, "up", "measure", 0, 0)); !errors.Is(err, ErrRunEnded) {
		t.Errorf("point on a finished run: %v", err)
	}
	s.Close()
	s, err = Open(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if got, err := s.Points(run.ID); err != nil || len(got) != len(pts) {
		t.Errorf("after reopen: %d points, %v", len(got), err)
	}
}

// Point keys of different identities never collide, whatever the strings.
func TestPointKeysDistinct(t *testing.T) {
	seen := map[string]analysis.Point{}
	for _, c := range []int{0, 1, 256} {
		for _, k := range []analysis.PointKind{"a", "ab", "b", "measure"} {
			for _, d := range []analysis.Direction{"", "b", "ba", "up"} {
				for _, i := range []int{0, 1, 65536} {
					for _, dev := range []string{"", "a", "pt-1", "pt-10"} {
						p := analysis.Point{Cycle: c, Kind: k, Direction: d, Index: i, Device: dev}
						key, err := pointKey(p)
						if err != nil {
							t.Fatal(err)
						}
						if q, dup := seen[string(key)]; dup {
							t.Fatalf("%+v and %+v share key %x", p, q, key)
						}
						if name := pointName(key); dev != "" && !strings.HasSuffix(name, " of "+dev) {
							t.Errorf("key of %+v reads back as %q", p, name)
						}
						seen[string(key)] = p
					}
				}
			}
		}
	}
}

func TestEvents(t *testing.T) {
	clk := clock.NewManual(t0)
	s, _ := openTest(t, Options{Clock: clk})
	run := newRun(t, s)
	id, err := s.AddEvent(Event{Run: run.ID, Level: slog.LevelInfo, Type: "state", Message: "run started", Data: json.RawMessage(`{"from":"pending"}`)})
	if err != nil || id != 1 {
		t.Fatalf("first event: %d %v", id, err)
	}
	got := make(chan Event, 10)
	for i := range 5 {
		err := s.QueueEvent(Event{Run: run.ID, Level: slog.LevelWarn, Instrument: "dut", Type: "read_error", Message: fmt.Sprintf("timeout %d", i)},
			func(e Event, err error) {
				if err != nil {
					t.Error(err)
				}
				got <- e
			})
		if err != nil {
			t.Fatal(err)
		}
	}
	if err := s.Flush(); err != nil {
		t.Fatal(err)
	}
	for i := range 5 {
		e := <-got
		if e.ID != uint64(2+i) || e.Message != fmt.Sprintf("timeout %d", i) {
			t.Errorf("committed callback %d: %+v", i, e)
		}
	}
	if id, err := s.AddEvent(Event{Level: slog.LevelError, Type: "store", Message: "x", Time: t0.Add(time.Hour)}); err != nil || id != 7 {
		t.Fatalf("last event: %d %v", id, err)
	}
	for _, tc := range []struct {
		since uint64
		limit int
		ids   []uint64
	}{
		{0, 0, []uint64{1, 2, 3, 4, 5, 6, 7}},
		{0, 2, []uint64{1, 2}},
		{5, 10, []uint64{6, 7}},
		{7, 10, nil},
		{math.MaxUint64, 10, nil},
	} {
		evs, err := s.Events(tc.since, tc.limit)
		if err != nil {
			t.Fatal(err)
		}
		var ids []uint64
		for _, e := range evs {
			ids = append(ids, e.ID)
		}
		if fmt.Sprint(ids) != fmt.Sprint(tc.ids) {
			t.Errorf("Events(%d, %d) ids %v, want %v", tc.since, tc.limit, ids, tc.ids)
		}
	}
	evs, _ := s.Events(0, 1)
	e := evs[0]
	if !e.Time.Equal(t0) || e.Level != slog.LevelInfo || e.Run != run.ID || string(e.Data) != `{"from":"pending"}` {
		t.Errorf("first event read back: %+v", e)
	}
	if last, err := s.LastEventID(); err != nil || last != 7 {
		t.Errorf("last id %d %v", last, err)
	}
	if _, err := s.AddEvent(Event{Type: "x", Data: json.RawMessage(`{bad`)}); !errors.Is(err, ErrBadInput) {
		t.Errorf("bad JSON data: %v", err)
	}
	if _, err := s.AddEvent(Event{Message: "no type"}); !errors.Is(err, ErrBadInput) {
		t.Errorf("empty type: %v", err)
	}
}

func TestPutRefusals(t *testing.T) {
	s, _ := openTest(t, Options{})
	run := newRun(t, s)
	ok := Sample{Time: t0, Pa: 1}
	for _, tc := range []struct {
		name string
		run  RunID
		inst string
		smp  Sample
		want error
	}{
		{"unknown run", 9, "ref", ok, ErrNoRun},
		{"empty instrument", run.ID, "", ok, ErrBadInput},
		{"long instrument", run.ID, strings.Repeat("x", 256), ok, ErrBadInput},
		{"no time", run.ID, "ref", Sample{Pa: 1}, ErrBadInput},
		{"before 1970", run.ID, "ref", Sample{Time: time.Date(1960, 1, 1, 0, 0, 0, 0, time.UTC)}, ErrBadInput},
		{"failed read with a value", run.ID, "ref", Sample{Time: t0, Failed: true, Pa: 1}, ErrBadInput},
		{"failed read with a unit", run.ID, "ref", Sample{Time: t0, Failed: true, RawUnit: "bar"}, ErrBadInput},
	} {
		if err := s.Put(tc.run, tc.inst, tc.smp); !errors.Is(err, tc.want) {
			t.Errorf("%s: %v, want %v", tc.name, err, tc.want)
		}
	}
	if _, err := s.SetState(run.ID, StateFailed, "hose burst"); err != nil {
		t.Fatal(err)
	}
	if err := s.Put(run.ID, "ref", ok); !errors.Is(err, ErrRunEnded) {
		t.Errorf("ended run: %v", err)
	}
	open := newRun(t, s)
	s.Close()
	if err := s.Put(open.ID, "ref", ok); !errors.Is(err, ErrClosed) {
		t.Errorf("closed store: %v", err)
	}
	if err := s.Flush(); !errors.Is(err, ErrClosed) {
		t.Errorf("flush closed: %v", err)
	}
}

// The writer keeps the block being filled of each instrument of a run in
// memory; once the run has ended it lets go of them, so a daemon that runs
// for months holds nothing per past run. A sample queued just before its
// run ended is still committed, and every sample reads back.
func TestWriterForgetsEndedRuns(t *testing.T) {
	s, _ := openTest(t, Options{})
	put := func(run RunID, inst string, i int) {
		t.Helper()
		if err := s.Put(run, inst, Sample{Time: t0.Add(time.Duration(i) * time.Second), Pa: float64(i), Raw: float64(i), RawUnit: "Pa"}); err != nil {
			t.Fatal(err)
		}
	}
	flushStreams := func(want int) {
		t.Helper()
		if err := s.Flush(); err != nil {
			t.Fatal(err)
		}
		if got := s.WriterStatus().Streams; got != want {
			t.Fatalf("writer holds %d streams, want %d", got, want)
		}
	}
	first := newRun(t, s)
	for i := range 10 {
		put(first.ID, "ref", i)
		put(first.ID, "dut", i)
	}
	flushStreams(2)
	put(first.ID, "ref", 10) // queued before the run ends
	if _, err := s.SetState(first.ID, StateFinished, ""); err != nil {
		t.Fatal(err)
	}
	second := newRun(t, s)
	put(second.ID, "ref", 0)
	flushStreams(1)
	for inst, want := range map[string]int{"ref": 11, "dut": 10} {
		got := collect(t, s, first.ID, inst, time.Time{}, time.Time{})
		if len(got) != want || got[len(got)-1].Pa != float64(want-1) {
			t.Errorf("%s of the ended run: %d samples, want %d", inst, len(got), want)
		}
	}
	if _, err := s.SetState(second.ID, StateStopped, "operator"); err != nil {
		t.Fatal(err)
	}
	third := newRun(t, s)
	put(third.ID, "dut", 0)
	flushStreams(1)
}

type sent struct {
	inst string
	r    drivers.Reading
	err  error
}

func collect(t testing.TB, s *Store, run RunID, inst string, from, to time.Time) []Sample {
	t.Helper()
	var out []Sample
	if err := s.Samples(run, inst, from, to, func(x Sample) error { out = append(out, x); return nil }); err != nil {
		t.Fatal(err)
	}
	return out
}

func TestSamplesRoundTrip(t *testing.T) {
	s, path := openTest(t, Options{WireEvery: 1, BatchSamples: 97})
	run := newRun(t, s)
	rng := rand.New(rand.NewPCG(1, 2))
	var all []sent
	at := t0
	for range 5000 {
		if rng.IntN(10) != 0 { // equal times happen too
			at = at.Add(time.Duration(1+rng.IntN(100_000_000)) * time.Nanosecond)
		}
		inst := []string{"reference", "dut"}[rng.IntN(2)]
		r := drivers.Reading{Time: at, Pa: 1.6e6 + rng.NormFloat64(), Raw: 16 + rng.NormFloat64()*1e-5, RawUnit: "bar",
			Wire: fmt.Sprintf("+%.5f", 16+rng.Float64())}
		switch rng.IntN(50) {
		case 0:
			r.RawUnit = "mA" // unit change starts a new block
		case 1:
			r.Pa, r.Raw = -0.0, math.Inf(-1) // odd values keep their bits
		}
		var err error
		if rng.IntN(20) == 0 {
			r.Pa, r.Raw, r.RawUnit = 0, 0, ""
			err = drivers.Fail(inst, drivers.KindTimeout, errors.New("no reply within 500 ms"))
			if rng.IntN(2) == 0 {
				err = errors.New("port closed")
			}
		}
		if err := s.Put(run.ID, inst, SampleOf(r, err)); err != nil {
			t.Fatal(err)
		}
		all = append(all, sent{inst, r, err})
	}
	if err := s.Flush(); err != nil {
		t.Fatal(err)
	}
	verify := func(s *Store, from, to time.Time) {
		t.Helper()
		for _, inst := range []string{"reference", "dut"} {
			var want []sent
			for _, x := range all {
				if x.inst == inst && (from.IsZero() || !x.r.Time.Before(from)) && (to.IsZero() || !x.r.Time.After(to)) {
					want = append(want, x)
				}
			}
			got := collect(t, s, run.ID, inst, from, to)
			if len(got) != len(want) {
				t.Fatalf("%s [%v, %v]: %d samples, want %d", inst, from, to, len(got), len(want))
			}
			for i, g := range got {
				w := want[i]
				bad := !g.Time.Equal(w.r.Time) || g.Wire != w.r.Wire || g.Failed != (w.err != nil)
				if w.err == nil {
					bad = bad || !same(g.Pa, w.r.Pa) || !same(g.Raw, w.r.Raw) || g.RawUnit != w.r.RawUnit
				} else {
					bad = bad || g.Kind != drivers.KindOf(w.err) || g.Message != w.err.Error()
				}
				if bad {
					t.Fatalf("%s sample %d:\n got %+v\nwant %+v (err %v)", inst, i, g, w.r, w.err)
				}
			}
		}
	}
	verify(s, time.Time{}, time.Time{})
	mid, end := all[1000].r.Time, all[3000].r.Time
	verify(s, mid, end)
	verify(s, mid, mid)
	verify(s, time.Time{}, mid)
	if inst, err := s.Instruments(run.ID); err != nil || len(inst) != 2 {
		t.Errorf("instruments %v %v", inst, err)
	}

	// A restarted process appends to the same streams, even at equal times.
	s.Close()
	s, err := Open(path, Options{WireEvery: 1})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	last := all[len(all)-1].r
	for i := range 3 {
		r := drivers.Reading{Time: last.Time, Pa: float64(i), RawUnit: "bar", Wire: "again"}
		if err := s.Put(run.ID, "dut", SampleOf(r, nil)); err != nil {
			t.Fatal(err)
		}
		all = append(all, sent{"dut", r, nil})
	}
	if err := s.Flush(); err != nil {
		t.Fatal(err)
	}
	verify(s, time.Time{}, time.Time{})
	verify(s, last.Time, time.Time{})
}

func TestWireKeptEveryNth(t *testing.T) {
	for _, tc := range []struct {
		every, want int
	}{{1, 100}, {10, 10}, {-1, 0}, {0, 1}} { // 0 = default 100
		s, _ := openTest(t, Options{WireEvery: tc.every})
		run := newRun(t, s)
		for i := range 100 {
			s.Put(run.ID, "ref", SampleOf(drivers.Reading{Time: t0.Add(time.Duration(i) * time.Second), Pa: 1, Wire: "01 02"}, nil))
		}
		s.Put(run.ID, "ref", SampleOf(drivers.Reading{Time: t0.Add(time.Hour), Wire: "garbage"}, errors.New("bad reply")))
		s.Flush()
		n := 0
		smp := collect(t, s, run.ID, "ref", time.Time{}, time.Time{})
		for _, x := range smp[:100] {
			if x.Wire != "" {
				n++
			}
		}
		if n != tc.want || smp[100].Wire != "garbage" {
			t.Errorf("WireEvery %d: %d wire texts kept, want %d; failed read wire %q", tc.every, n, tc.want, smp[100].Wire)
		}
	}
}

// Without Flush, queued samples are committed within the flush interval.
func TestSamplesCommittedByInterval(t *testing.T) {
	s, _ := openTest(t, Options{FlushInterval: 20 * time.Millisecond})
	run := newRun(t, s)
	for i := range 10 {
		if err := s.Put(run.ID, "ref", SampleOf(drivers.Reading{Time: t0.Add(time.Duration(i) * time.Second), Pa: float64(i)}, nil)); err != nil {
			t.Fatal(err)
		}
	}
	deadline := time.Now().Add(5 * time.Second)
	for len(collect(t, s, run.ID, "ref", time.Time{}, time.Time{})) < 10 {
		if time.Now().After(deadline) {
			t.Fatal("samples not committed without Flush")
		}
		time.Sleep(10 * time.Millisecond)
	}
	if st := s.WriterStatus(); st.Committed != 10 || st.Err != nil || st.LastCommit.IsZero() {
		t.Errorf("writer status %+v", st)
	}
}

// A full disk (here a size cap) fails the commit visibly; nothing queued is
// dropped while the writer retries.
func TestWriteFailureIsReported(t *testing.T) {
	path := filepath.Join(t.TempDir(), "small.db")
	s, err := Open(path, Options{MaxSize: 256 << 10})
	if err != nil {
		t.Fatal(err)
	}
	run := newRun(t, s)
	var ferr error
	for i := 0; ferr == nil && i < 200; i++ {
		for j := range 500 {
			s.Put(run.ID, "ref", SampleOf(drivers.Reading{Time: t0.Add(time.Duration(i*500+j) * time.Millisecond), Pa: rand.Float64(), Wire: strings.Repeat("x", 200)}, nil))
		}
		ferr = s.Flush()
	}
	if !errors.Is(ferr, ErrStoreWrite) || !errors.Is(ferr, berrors.ErrMaxSizeReached) {
		t.Fatalf("flush on a full store: %v", ferr)
	}
	if st := s.WriterStatus(); st.Err == nil || st.Pending == 0 {
		t.Errorf("writer status %+v", st)
	}
	if err := s.Close(); err == nil {
		t.Error("close did not report the lost batch")
	}
	checkFile(t, path)
}

func TestBackup(t *testing.T) {
	s, _ := openTest(t, Options{})
	run := newRun(t, s)
	s.Put(run.ID, "ref", SampleOf(drivers.Reading{Time: t0, Pa: 42}, nil))
	s.Flush()
	if _, _, err := s.AddPoint(run.ID, point(1, "up", "measure", 0, 0)); err != nil {
		t.Fatal(err)
	}
	copyPath := filepath.Join(t.TempDir(), "copy.db")
	f, err := os.Create(copyPath)
	if err != nil {
		t.Fatal(err)
	}
	n, err := s.Backup(f)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil || n == 0 {
		t.Fatalf("backup: %d bytes, %v", n, err)
	}
	checkFile(t, copyPath)
	c, err := Open(copyPath, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	pts, err := c.Points(run.ID)
	if err != nil || len(pts) != 1 || len(collect(t, c, run.ID, "ref", time.Time{}, time.Time{})) != 1 {
		t.Errorf("backup content: %d points, %v", len(pts), err)
	}
}
