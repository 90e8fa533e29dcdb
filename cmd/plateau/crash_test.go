package main

import (
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/procedure"
	"plateau/acquire/store"
	"plateau/config"
)

// A process running a procedure on the simulated bench is killed with
// SIGKILL at random moments; after every kill the store passes bbolt's
// consistency check and every point captured before the kill is still there,
// and the restarted run completes with every planned point exactly once.
func TestKillAndResume(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the program and kills it 20 times")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "crash")
	cfg, err := config.Load(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	total := procedure.CaptureCount(procedure.Plan(cfg.Procedure, cfg.Device.LowerPa))

	rng := rand.New(rand.NewPCG(1, 2))
	kept := &keptPoints{path: cfg.Store.Path}
	check := func(stage string) int { return kept.check(t, stage) }
	kills := killRuns(t, bin, dir, cfgPath, "crash test", 20, func() time.Duration {
		return time.Duration(200+rng.IntN(900)) * time.Millisecond
	}, func(int) bool { return check("after kill") == total })
	st, err := store.Open(cfg.Store.Path, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	unfinished, err := st.Unfinished()
	st.Close()
	if err != nil {
		t.Fatal(err)
	}
	if len(unfinished) > 0 {
		out, err := exec.Command(bin, "run", "-q", "-c", cfgPath).CombinedOutput()
		if err != nil {
			t.Fatalf("final run: %v\n%s", err, out)
		}
	}
	if n := check("final"); n != total {
		t.Fatalf("%d points after %d kills, want %d", n, kills, total)
	}
	// Time only moves forward across the restarts: event times never
	// decrease, and every point's windows are exactly the samples stored
	// over them (a clock that went back would mix samples of two sessions).
	st, err = store.Open(cfg.Store.Path, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	evs, err := st.Events(0, 100000)
	if err != nil {
		t.Fatal(err)
	}
	for i := 1; i < len(evs); i++ {
		if evs[i].Time.Before(evs[i-1].Time) {
			t.Errorf("event %d at %s is before event %d at %s", evs[i].ID, evs[i].Time, evs[i-1].ID, evs[i-1].Time)
		}
	}
	runs, _ := st.Runs()
	st.Close()
	pts := storedPoints(t, cfg.Store.Path, runs[0].ID.String(), store.StateFinished)
	checkPointsBackedBySamples(t, cfgPath, cfg.Store.Path, runs[0].ID.String(), pts)
	t.Logf("%d kills, %d points, none lost or doubled; %d events in time order; windows match the stored samples", kills, total, len(evs))
}

// A run interrupted under one procedure is not resumed under another: the
// cursor counts steps of the plan it started with. The old run is closed
// as failed with the reason, its points kept, and a new run starts.
func TestResumeRefusesChangedPlan(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the program as a process")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "plan")
	base, err := os.ReadFile(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	write := func(text string) {
		if err := os.WriteFile(cfgPath, []byte(text), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	cmd := exec.Command(bin, "run", "-q", "-c", cfgPath)
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	time.Sleep(1500 * time.Millisecond)
	cmd.Process.Kill()
	cmd.Wait()

	changed := strings.Replace(string(base), "points: [0 %, 20 %, 40 %, 60 %, 80 %, 100 %]", "points: [0 %, 50 %, 100 %]", 1)
	if changed == string(base) {
		t.Fatal("the example's points line changed; update this test")
	}
	write(changed)
	if out, err := exec.Command(bin, "run", "-q", "-c", cfgPath).CombinedOutput(); err != nil {
		t.Fatalf("second run: %v\n%s", err, out)
	}
	st, err := store.Open(filepath.Join(dir, "plan.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	runs, err := st.Runs()
	if err != nil || len(runs) != 2 {
		t.Fatalf("runs %+v, %v; want the refused run and a new one", runs, err)
	}
	if runs[0].State != store.StateFailed || !strings.Contains(runs[0].Reason, "procedure in the configuration changed") {
		t.Errorf("first run %s: %s", runs[0].State, runs[0].Reason)
	}
	if runs[1].State != store.StateFinished {
		t.Errorf("second run %s: %s", runs[1].State, runs[1].Reason)
	}
	if err := st.Check(); err != nil {
		t.Error(err)
	}
}

// killRuns starts 'plateau run' with cfgPath in dir and kills it with
// SIGKILL after wait(), up to most times, calling after(kill) once each
// process has gone; it stops early when after says the run is complete.
// It returns the number of kills.
func killRuns(t *testing.T, bin, dir, cfgPath, label string, most int, wait func() time.Duration, after func(kill int) bool) int {
	t.Helper()
	kills := 0
	for kills < most {
		cmd := exec.Command(bin, "run", "-q", "-c", cfgPath, "--label", label)
		cmd.Dir = dir
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		time.Sleep(wait())
		if err := cmd.Process.Kill(); err != nil {
			t.Fatal(err)
		}
		cmd.Wait()
		kills++
		if after(kills) {
			break
		}
	}
	return kills
}
