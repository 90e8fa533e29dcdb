package store

import (
	"errors"
	"log/slog"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/analysis"
	"plateau/drivers/clock"
)

// immutable makes the store's file refuse every write, even through the
// descriptor bbolt holds and even for root, and returns the undo. The test
// is skipped where the file system has no immutable attribute (and fails
// under CI=true, like a missing peer).
func immutable(t *testing.T, path string) func() {
	t.Helper()
	if out, err := exec.Command("chattr", "+i", path).CombinedOutput(); err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("chattr +i: %v %s", err, out)
		}
		t.Skipf("chattr +i not available: %v %s", err, out)
	}
	undone := false
	undo := func() {
		if !undone {
			undone = true
			if out, err := exec.Command("chattr", "-i", path).CombinedOutput(); err != nil {
				t.Errorf("chattr -i: %v %s", err, out)
			}
		}
	}
	t.Cleanup(undo)
	return undo
}

// While the file cannot be written, Flush returns the error at once, the
// status counts what is pending, no point is stored ahead of its samples,
// and nothing queued is lost: once the file is writable again everything
// is committed.
func TestWriterFailureKeepsSamplesPending(t *testing.T) {
	s, path := openTest(t, Options{FlushInterval: 20 * time.Millisecond, BatchSamples: 50})
	run := newRun(t, s)
	undo := immutable(t, path)
	const n = 500 // more than the 4 × BatchSamples the writer holds: the rest waits in the queue
	done := make(chan error, 1)
	go func() {
		for i := range n {
			bar := float64(i) / 1e5
			if err := s.Put(run.ID, "ref", Sample{Time: t0.Add(time.Duration(i) * 50 * time.Millisecond), Raw: bar, Pa: bar * 1e5, RawUnit: "bar"}); err != nil {
				done <- err
				return
			}
		}
		done <- nil
	}()
	deadline := time.Now().Add(10 * time.Second)
	for s.WriterStatus().Pending < 200 && time.Now().Before(deadline) {
		time.Sleep(5 * time.Millisecond)
	}
	start := time.Now()
	err := s.Flush()
	if !errors.Is(err, ErrStoreWrite) {
		t.Fatalf("flush while the file cannot be written: %v", err)
	}
	if d := time.Since(start); d > 10*time.Second { // one failing commit, not a wait for the disk
		t.Errorf("flush took %v while failing", d)
	}
	st := s.WriterStatus()
	if st.Err == nil || st.Pending == 0 || st.Failures == 0 {
		t.Errorf("status while failing: %+v", st)
	}
	if _, _, err := s.AddPoint(run.ID, point(1, analysis.Ascending, analysis.Measurement, 0, 0)); err == nil || !strings.Contains(err.Error(), "samples are not committed") {
		t.Errorf("a point while its samples cannot be committed: %v", err)
	}
	undo()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if err := s.Flush(); err != nil {
		t.Fatalf("flush after the file is writable again: %v", err)
	}
	if got := len(collect(t, s, run.ID, "ref", time.Time{}, time.Time{})); got != n {
		t.Fatalf("%d samples committed, want %d", got, n)
	}
	if st := s.WriterStatus(); st.Err != nil || st.Pending != 0 || st.Committed != n {
		t.Errorf("status after recovery: %+v", st)
	}
	if _, _, err := s.AddPoint(run.ID, point(1, analysis.Ascending, analysis.Measurement, 0, 0)); err != nil {
		t.Error(err)
	}
}

// FailRun retries a failing state write: the run ends failed once the file
// takes writes again; failing throughout, the error says so and the run
// takes no more samples.
func TestFailRunRetries(t *testing.T) {
	s, path := openTest(t, Options{})
	a, b := newRun(t, s), newRun(t, s)
	// Long waits between attempts, so that a loaded machine still makes
	// the file writable again before the last one.
	defer func(old []time.Duration) { failRetries = old }(failRetries)
	failRetries = []time.Duration{0, 300 * time.Millisecond, 3 * time.Second, 10 * time.Second}
	undo := immutable(t, path)
	go func() { time.Sleep(100 * time.Millisecond); undo() }()
	r, err := s.FailRun(a.ID, "store full")
	if err != nil || r.State != StateFailed || r.Reason != "store full" {
		t.Fatalf("fail run after a transient write failure: %+v %v", r, err)
	}
	if r, err := s.FailRun(a.ID, "again"); err != nil || r.Reason != "store full" {
		t.Errorf("failing an ended run again: %+v %v", r, err)
	}
	failRetries = []time.Duration{0, time.Millisecond, time.Millisecond}
	undo = immutable(t, path)
	if _, err := s.FailRun(b.ID, "bus down"); err == nil || !strings.Contains(err.Error(), "3 attempts") {
		t.Errorf("fail run on a file that stays unwritable: %v", err)
	}
	if err := s.Put(b.ID, "ref", Sample{Time: t0, Raw: 1}); !errors.Is(err, ErrRunEnded) {
		t.Errorf("a sample for a run that could not be closed: %v", err)
	}
	undo()
	if got, err := s.Run(b.ID); err != nil || got.State.Terminal() {
		t.Fatalf("run b as stored: %+v %v", got, err)
	}
	closed, err := s.CloseUnfinished(0, "closed at start-up: the daemon stopped during the run")
	if err != nil || len(closed) != 1 || closed[0].ID != b.ID || closed[0].State != StateFailed {
		t.Errorf("close unfinished: %+v %v", closed, err)
	}
}

// At most one run is unfinished: CreateSoleRun refuses while one is, and
// CloseUnfinished closes all but the one kept.
func TestOneUnfinishedRun(t *testing.T) {
	s, _ := openTest(t, Options{})
	old := newRun(t, s)
	newer := newRun(t, s) // made with the plain call, as an older build could
	_, err := s.CreateSoleRun("third", nil, nil)
	var ue *UnfinishedError
	if !errors.As(err, &ue) || ue.Run != old.ID || !errors.Is(err, ErrUnfinished) || !strings.Contains(err.Error(), "r000001 is still pending") {
		t.Fatalf("sole run beside unfinished ones: %v", err)
	}
	closed, err := s.CloseUnfinished(newer.ID, "an older unfinished run, closed at start-up")
	if err != nil || len(closed) != 1 || closed[0].ID != old.ID || closed[0].Reason != "an older unfinished run, closed at start-up" {
		t.Fatalf("close unfinished: %+v %v", closed, err)
	}
	if _, err := s.CreateSoleRun("third", nil, nil); !errors.As(err, &ue) || ue.Run != newer.ID {
		t.Fatalf("sole run beside the kept one: %v", err)
	}
	if _, err := s.SetState(newer.ID, StateStopped, "operator"); err != nil {
		t.Fatal(err)
	}
	if r, err := s.CreateSoleRun("third", []byte("c"), []byte("rec")); err != nil || r.ID != 3 || string(r.Record) != "rec" {
		t.Fatalf("sole run once none is unfinished: %+v %v", r, err)
	}
	if un, err := s.Unfinished(); err != nil || len(un) != 1 {
		t.Errorf("unfinished %+v %v", un, err)
	}
}

// LastTime is the latest time anywhere in the store, whichever kind of
// record holds it.
func TestLastTime(t *testing.T) {
	clk := clock.NewManual(t0)
	s, _ := openTest(t, Options{Clock: clk})
	if lt, err := s.LastTime(); err != nil || !lt.IsZero() {
		t.Fatalf("empty store: %v %v", lt, err)
	}
	run := newRun(t, s) // created at t0
	steps := []struct {
		name string
		do   func(at time.Time)
	}{
		{"sample", func(at time.Time) { s.Put(run.ID, "ref", Sample{Time: at, Raw: 1, Pa: 1e5, RawUnit: "bar"}) }},
		{"event", func(at time.Time) { s.AddEvent(Event{Time: at, Type: "note", Level: slog.LevelInfo}) }},
		{"point window", func(at time.Time) {
			p := point(1, analysis.Ascending, analysis.Measurement, int(at.Sub(t0)/time.Hour), 0)
			p.DUT.End = at
			s.AddPoint(run.ID, p)
		}},
		{"run update", func(at time.Time) { clk.Advance(at.Sub(clk.Now())); s.SetCursor(run.ID, []byte("x")) }},
		{"queued event", func(at time.Time) { s.QueueEvent(Event{Time: at, Type: "read_error"}, nil) }},
	}
	for i, st := range steps {
		at := t0.Add(time.Duration(i+1) * time.Hour)
		st.do(at)
		if err := s.Flush(); err != nil {
			t.Fatal(err)
		}
		if lt, err := s.LastTime(); err != nil || !lt.Equal(at) {
			t.Errorf("after a %s at %v: last time %v %v", st.name, at, lt, err)
		}
	}
	if free, err := s.FreeBytes(); err != nil || free == 0 {
		t.Errorf("free bytes %d %v", free, err)
	}
}

// Every sample's value lies within its bucket's min and max, every good
// sample is counted once, and the mean lies between min and max — for
// random streams, ranges and bucket counts (a property test).
func TestDownsampleProperty(t *testing.T) {
	s, _ := openTest(t, Options{})
	run := newRun(t, s)
	rng := rand.New(rand.NewPCG(7, 11))
	type kept struct {
		at     time.Time
		pa     float64
		failed bool
	}
	var all []kept
	at := t0
	for range 20_000 {
		at = at.Add(time.Duration(rng.IntN(100)) * time.Millisecond)
		if rng.IntN(50) == 0 {
			s.Put(run.ID, "ref", Sample{Time: at, Failed: true, Message: "timeout"})
			all = append(all, kept{at, 0, true})
			continue
		}
		bar := math.Round(rng.NormFloat64()*1e5) / 1e5
		s.Put(run.ID, "ref", Sample{Time: at, Raw: bar, Pa: bar * 1e5, RawUnit: "bar"})
		all = append(all, kept{at, bar * 1e5, false})
	}
	if err := s.Flush(); err != nil {
		t.Fatal(err)
	}
	for round := range 40 {
		n := 1 + rng.IntN(700)
		from, to := time.Time{}, time.Time{}
		if round%2 == 1 {
			i, j := rng.IntN(len(all)), rng.IntN(len(all))
			from, to = all[min(i, j)].at, all[max(i, j)].at
		}
		bs, err := s.Downsample(run.ID, "ref", from, to, n)
		if err != nil {
			t.Fatal(err)
		}
		if len(bs) != n {
			t.Fatalf("%d buckets, asked %d", len(bs), n)
		}
		lo, hi := bs[0].Start, bs[n-1].End
		good, failed := 0, 0
		for i, b := range bs {
			if i > 0 && !b.Start.Equal(bs[i-1].End) {
				t.Fatalf("bucket %d starts at %v, the previous ends at %v", i, b.Start, bs[i-1].End)
			}
			good += b.Count
			failed += b.Failed
			if b.Count > 0 && !(b.Min <= b.Mean && b.Mean <= b.Max) {
				t.Fatalf("bucket %d: mean %v outside [%v, %v]", i, b.Mean, b.Min, b.Max)
			}
		}
		wantGood, wantFailed := 0, 0
		for _, k := range all {
			if k.at.Before(lo) || !k.at.Before(hi) || (!to.IsZero() && k.at.After(to)) {
				continue
			}
			i := int(k.at.Sub(lo) / bs[0].End.Sub(bs[0].Start))
			b := bs[i]
			if k.at.Before(b.Start) || !k.at.Before(b.End) {
				t.Fatalf("sample at %v outside its bucket [%v, %v)", k.at, b.Start, b.End)
			}
			if k.failed {
				wantFailed++
				continue
			}
			wantGood++
			if k.pa < b.Min || k.pa > b.Max {
				t.Fatalf("round %d: sample %v at %v outside bucket %d's [%v, %v]", round, k.pa, k.at, i, b.Min, b.Max)
			}
		}
		if good != wantGood || failed != wantFailed {
			t.Fatalf("round %d: %d good and %d failed counted, want %d and %d", round, good, failed, wantGood, wantFailed)
		}
	}
	for _, bad := range []int{0, -1, MaxBuckets + 1} {
		if _, err := s.Downsample(run.ID, "ref", time.Time{}, time.Time{}, bad); !errors.Is(err, ErrBadInput) {
			t.Errorf("%d buckets: %v", bad, err)
		}
	}
	if bs, err := s.Downsample(run.ID, "nobody", time.Time{}, time.Time{}, 10); err != nil || bs != nil {
		t.Errorf("an instrument without samples: %v %v", bs, err)
	}
	if _, err := s.Downsample(run.ID, "ref", t0.Add(time.Hour), t0, 10); !errors.Is(err, ErrBadInput) {
		t.Errorf("to before from: %v", err)
	}
}

// Opening a file that does not exist read-only creates nothing.
func TestReadOnlyOpenOfNoFile(t *testing.T) {
	path := filepath.Join(t.TempDir(), "none.db")
	ro, err := Open(path, Options{ReadOnly: true})
	if err == nil {
		ro.Close()
		t.Error("read-only open created a store")
	}
	if _, err := os.Stat(path); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("read-only open left a file: %v", err)
	}
}
