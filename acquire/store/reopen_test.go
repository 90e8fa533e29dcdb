package store

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"

	"plateau/drivers"
)

// putNoisy queues n samples of each instrument, a millisecond apart from
// start, with values that do not compress (so pages fill quickly), and
// returns what was queued by instrument.
func putNoisy(t *testing.T, s *Store, run RunID, start time.Time, n int, rng *rand.Rand, insts ...string) map[string][]Sample {
	t.Helper()
	sent := map[string][]Sample{}
	for i := range n {
		at := start.Add(time.Duration(i) * time.Millisecond)
		for _, inst := range insts {
			raw := rng.Float64() * 16
			smp := SampleOf(drivers.Reading{Time: at, Pa: raw * 1e5, Raw: raw, RawUnit: "bar"}, nil)
			if err := s.Put(run, inst, smp); err != nil {
				t.Fatal(err)
			}
			sent[inst] = append(sent[inst], smp)
		}
	}
	return sent
}

func sameSamples(t *testing.T, what string, got, want []Sample) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: %d samples read back, %d written", what, len(got), len(want))
	}
	for i := range want {
		g, w := got[i], want[i]
		if !g.Time.Equal(w.Time) || math.Float64bits(g.Pa) != math.Float64bits(w.Pa) ||
			math.Float64bits(g.Raw) != math.Float64bits(w.Raw) || g.RawUnit != w.RawUnit || g.Failed != w.Failed {
			t.Fatalf("%s: sample %d read back as %+v, written as %+v", what, i, g, w)
		}
	}
}

// The writer closes and reopens the file every few pages while readers
// keep reading and a run keeps recording: nothing is lost or changed, no
// reader sees an error, and the file checks clean afterwards.
func TestReopenKeepsEverything(t *testing.T) {
	s, path := openTest(t, Options{BatchSamples: 500, reopenPages: 16})
	run := newRun(t, s)
	stop := make(chan struct{})
	var wg sync.WaitGroup
	var reads atomic.Int64
	readErr := make(chan error, 4)
	for range 3 {
		wg.Go(func() {
			for {
				select { // readers as a status page makes them: often, not back to back
				case <-stop:
					return
				case <-time.After(time.Millisecond):
				}
				_, err := s.Run(run.ID)
				if err == nil {
					// the newest second, as a live page asks for it
					err = s.Samples(run.ID, "reference", t0.Add(59*time.Second), time.Time{}, func(Sample) error { return nil })
				}
				if err != nil {
					readErr <- err
					return
				}
				reads.Add(1)
			}
		})
	}
	rng := rand.New(rand.NewPCG(7, 8))
	sent := putNoisy(t, s, run.ID, t0, 60_000, rng, "reference", "dut")
	if err := s.Flush(); err != nil {
		t.Fatal(err)
	}
	close(stop)
	wg.Wait()
	select {
	case err := <-readErr:
		t.Fatalf("a reader failed while the writer reopened the file: %v", err)
	default:
	}
	ws := s.WriterStatus()
	if ws.Reopens < 5 {
		t.Fatalf("the writer reopened the file %d times over 120 000 noisy samples with a limit of 16 pages", ws.Reopens)
	}
	t.Logf("%d reopens, %d reads alongside", ws.Reopens, reads.Load())
	// A point and an event still land after the reopens.
	if _, err := s.AddEvent(Event{Run: run.ID, Type: "note", Message: "after reopens"}); err != nil {
		t.Fatal(err)
	}
	for inst, want := range sent {
		sameSamples(t, inst, collect(t, s, run.ID, inst, time.Time{}, time.Time{}), want)
	}
	if err := s.Check(); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	again, err := Open(path, Options{ReadOnly: true})
	if err != nil {
		t.Fatal(err)
	}
	defer again.Close()
	for inst, want := range sent {
		sameSamples(t, inst+" after close", collect(t, again, run.ID, inst, time.Time{}, time.Time{}), want)
	}
}

// A file that cannot be opened again is a store fault, said as such on
// every call, and the writer keeps what it holds and tries again at each
// commit: once the file opens, everything queued lands.
func TestReopenFailureIsAFaultUntilItOpens(t *testing.T) {
	var failing atomic.Bool
	failing.Store(true)
	old := reopenBolt
	reopenBolt = func(path string, opt Options) (*bolt.DB, error) {
		if failing.Load() {
			return nil, errors.New("the file lock is held by another process")
		}
		return old(path, opt)
	}
	t.Cleanup(func() { reopenBolt = old })

	s, _ := openTest(t, Options{BatchSamples: 500, FlushInterval: 10 * time.Millisecond, reopenPages: 16})
	run := newRun(t, s)
	rng := rand.New(rand.NewPCG(9, 10))
	// Samples in small lots until the writer has closed the file to reopen
	// it and failed: few enough that the queue and the writer hold them all
	// while it cannot commit.
	sent := map[string][]Sample{}
	start := t0
	for lot := 0; ; lot++ {
		if lot == 40 {
			t.Fatal("the writer never reopened the file")
		}
		for k, v := range putNoisy(t, s, run.ID, start, 500, rng, "reference") {
			sent[k] = append(sent[k], v...)
		}
		start = start.Add(time.Second)
		s.Flush()
		if _, err := s.Run(run.ID); err != nil {
			if !strings.Contains(err.Error(), "could not be opened again") {
				t.Fatalf("a read while the file cannot be reopened: %v", err)
			}
			break
		}
	}
	for k, v := range putNoisy(t, s, run.ID, start, 100, rng, "reference") {
		sent[k] = append(sent[k], v...)
	}
	ferr := s.Flush()
	if !errors.Is(ferr, ErrStoreWrite) || !strings.Contains(ferr.Error(), "could not be opened again") ||
		!strings.Contains(ferr.Error(), "the file lock is held") {
		t.Fatalf("flush while the file cannot be reopened: %v", ferr)
	}
	if ws := s.WriterStatus(); ws.Err == nil || ws.Pending == 0 {
		t.Fatalf("writer status while the file cannot be reopened: %+v", ws)
	}
	failing.Store(false)
	deadline := time.Now().Add(10 * time.Second)
	for s.Flush() != nil {
		if time.Now().After(deadline) {
			t.Fatalf("the writer never recovered: %+v", s.WriterStatus())
		}
		time.Sleep(10 * time.Millisecond)
	}
	sameSamples(t, "reference", collect(t, s, run.ID, "reference", time.Time{}, time.Time{}), sent["reference"])
}
