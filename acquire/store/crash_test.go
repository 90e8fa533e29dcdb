package store

import (
	"bufio"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"plateau/analysis"
	"plateau/drivers"
)

const crashChildEnv = "PLATEAU_STORE_CRASH_CHILD"

// crashChild is the process that gets killed: it appends samples and points
// to run 1 as fast as it can and prints "P <cycle> <index> <seq>" after each
// AddPoint has returned (that is, after the point was committed).
func crashChild(path string) {
	fail := func(err error) { fmt.Printf("E %v\n", err); os.Exit(3) }
	s, err := Open(path, Options{Timeout: 5 * time.Second, BatchSamples: 64, FlushInterval: 5 * time.Millisecond})
	if err != nil {
		fail(err)
	}
	pts, err := s.Points(1)
	if err != nil {
		fail(err)
	}
	// Resuming: the last captured point comes again and must be recognised.
	if n := len(pts); n > 0 {
		if _, existed, err := s.AddPoint(1, pts[n-1]); err != nil || !existed {
			fail(fmt.Errorf("re-adding point %d: existed %v, %v", n-1, existed, err))
		}
	}
	// Sample times continue after the last stored one, as a restarted
	// engine's clock would.
	at := t0
	for _, inst := range []string{"reference", "dut"} {
		err := s.Samples(1, inst, time.Time{}, time.Time{}, func(x Sample) error {
			if x.Time.After(at) {
				at = x.Time
			}
			return nil
		})
		if err != nil {
			fail(err)
		}
	}
	fmt.Println("ready")
	for k := len(pts); ; k++ {
		for range 20 {
			at = at.Add(50 * time.Millisecond)
			for _, inst := range []string{"reference", "dut"} {
				if err := s.Put(1, inst, SampleOf(drivers.Reading{Time: at, Pa: 1e5 + float64(k), Raw: 1, RawUnit: "bar", Wire: "1.00000"}, nil)); err != nil {
					fail(err)
				}
			}
		}
		p := point(1+k/10, analysis.Ascending, analysis.Measurement, k%10, float64(k%10)*1e5)
		seq, existed, err := s.AddPoint(1, p)
		if err != nil || existed {
			fail(fmt.Errorf("point %d: existed %v, %v", k, existed, err))
		}
		fmt.Printf("P %d %d %d\n", p.Cycle, p.Index, seq)
	}
}

// Kill a writing process at random moments; after each kill the file must
// open, pass the consistency check, and hold every point the child reported
// as committed exactly once. SIGKILL tests a process crash (the page cache
// survives), not a power cut.
func TestCrashSafety(t *testing.T) {
	if path := os.Getenv(crashChildEnv); path != "" {
		crashChild(path)
		return
	}
	path := filepath.Join(t.TempDir(), "crash.db")
	s, err := Open(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	run := newRun(t, s)
	if _, err := s.SetState(run.ID, StateRunning, ""); err != nil {
		t.Fatal(err)
	}
	s.Close()

	rng := rand.New(rand.NewPCG(2026, 3))
	reported := map[[2]int]uint64{} // (cycle, index) → seq
	const kills = 25
	for round := range kills {
		cmd := exec.Command(os.Args[0], "-test.run=^TestCrashSafety$", "-test.count=1")
		cmd.Env = append(os.Environ(), crashChildEnv+"="+path)
		out, err := cmd.StdoutPipe()
		if err != nil {
			t.Fatal(err)
		}
		cmd.Stderr = os.Stderr
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		lines := make(chan string, 1<<16)
		go func() {
			sc := bufio.NewScanner(out)
			for sc.Scan() {
				lines <- sc.Text()
			}
			close(lines)
		}()
		var got []string
		ready := time.After(20 * time.Second)
	wait:
		for {
			select {
			case l, ok := <-lines:
				if !ok {
					break wait
				}
				got = append(got, l)
				if l == "ready" {
					break wait
				}
			case <-ready:
				t.Fatal("child never became ready")
			}
		}
		time.Sleep(time.Duration(5_000+rng.IntN(100_000)) * time.Microsecond)
		cmd.Process.Signal(syscall.SIGKILL)
		for l := range lines {
			got = append(got, l)
		}
		werr := cmd.Wait()
		if ws, ok := cmd.ProcessState.Sys().(syscall.WaitStatus); !ok || !ws.Signaled() {
			t.Fatalf("round %d: child ended by itself (%v): %q", round, werr, got)
		}
		for _, l := range got {
			f := strings.Fields(l)
			switch {
			case len(f) == 4 && f[0] == "P":
				c, _ := strconv.Atoi(f[1])
				i, _ := strconv.Atoi(f[2])
				seq, _ := strconv.ParseUint(f[3], 10, 64)
				reported[[2]int{c, i}] = seq
			case l == "ready":
			default:
				t.Fatalf("round %d: child said %q", round, l)
			}
		}

		s, err := Open(path, Options{})
		if err != nil {
			t.Fatalf("round %d: reopen after kill: %v", round, err)
		}
		if err := s.Check(); err != nil {
			t.Fatalf("round %d: %v", round, err)
		}
		pts, err := s.Points(run.ID)
		if err != nil {
			t.Fatal(err)
		}
		count := map[[2]int]int{}
		for _, p := range pts {
			count[[2]int{p.Cycle, p.Index}]++
		}
		for k, seq := range reported {
			if count[k] != 1 {
				t.Fatalf("round %d: reported point cycle %d index %d (seq %d) stored %d times", round, k[0], k[1], seq, count[k])
			}
		}
		for k, n := range count {
			if n != 1 {
				t.Fatalf("round %d: point %v stored %d times", round, k, n)
			}
		}
		for _, inst := range []string{"reference", "dut"} {
			var last time.Time
			err := s.Samples(run.ID, inst, time.Time{}, time.Time{}, func(x Sample) error {
				if x.Time.Before(last) || x.Pa < 1e5 {
					return fmt.Errorf("sample %+v after %v", x, last)
				}
				last = x.Time
				return nil
			})
			if err != nil {
				t.Fatalf("round %d: samples of %s: %v", round, inst, err)
			}
		}
		s.Close()
	}
	if len(reported) < kills/2 { // each point waits for two fsyncs: its samples', then its own
		t.Errorf("only %d points reported over %d kills: the child barely ran", len(reported), kills)
	}
	t.Logf("%d kills, %d committed points checked", kills, len(reported))
	checkFile(t, path)
}
