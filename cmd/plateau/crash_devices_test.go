package main

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/procedure"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/config"
)

// devicesConfig writes the four-device example of the simulated bench
// (testdata/config/sim-devices.yaml) to dir/name.yaml with its store and
// socket in dir and the clock at 40×, and returns the file's path. (At 60×
// its RTU line of three devices at 19 200 Bd cannot fill a 10 s settling
// window: the line carries a sixtieth of its reads per clock second.)
func devicesConfig(t *testing.T, dir, name string) string {
	t.Helper()
	text, err := os.ReadFile("../../testdata/config/sim-devices.yaml")
	if err != nil {
		t.Fatal(err)
	}
	out := strings.NewReplacer(
		"path: plateau-sim-devices.db", "path: "+filepath.Join(dir, name+".db"),
		"socket: plateau-sim-devices.sock", "socket: "+filepath.Join(dir, name+".sock"),
		"speed: 20", "speed: 40",
		// The guard's silence limit is wall time: a machine loaded by the
		// whole suite under -race can starve the reference's poller for
		// the default few seconds, and the trip would pause the run for a
		// person. This test is about kills, not that promise.
		"max_pressure: 16.5 bar", "max_pressure: 16.5 bar\n  silence: 1m",
	).Replace(string(text))
	if out == string(text) {
		t.Fatal("the example's store, socket or speed line changed; update this test")
	}
	path := filepath.Join(dir, name+".yaml")
	if err := os.WriteFile(path, []byte(out), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// A process calibrating four simulated devices in one run is killed with
// SIGKILL at random moments, at least ten times. After every kill the
// store passes bbolt's consistency check and 'plateau verify', no device
// has a point twice and every point of every device captured before the
// kill is still there; the restarted run completes with every planned
// point of every device exactly once, each point's device window made of
// that device's own stored samples.
func TestKillAndResumeFourDevices(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the program and kills it at least ten times")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := devicesConfig(t, dir, "devices")
	cfg, err := config.Load(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	if len(cfg.Devices) != 4 {
		t.Fatalf("%d devices in the example, want 4", len(cfg.Devices))
	}
	perDevice := procedure.CaptureCount(procedure.Plan(cfg.Procedure, cfg.Device.LowerPa))
	total := 4 * perDevice

	verify := func(stage string) {
		t.Helper()
		if out, err := exec.Command(bin, "verify", "--store", cfg.Store.Path).CombinedOutput(); err != nil {
			t.Fatalf("%s: plateau verify: %v\n%s", stage, err, out)
		}
	}
	rng := rand.New(rand.NewPCG(14, 4))
	kept := &keptPoints{path: cfg.Store.Path}
	check := func(stage string) int { t.Helper(); return kept.check(t, stage) }
	n := 0
	kills := killRuns(t, bin, dir, cfgPath, "four devices, killed", 12, func() time.Duration {
		return time.Duration(300+rng.IntN(1200)) * time.Millisecond
	}, func(kill int) bool {
		n = check(fmt.Sprintf("after kill %d", kill))
		verify(fmt.Sprintf("after kill %d", kill))
		return n == total
	})
	if kills < 10 {
		t.Errorf("the run completed after %d kills: fewer than ten kills hit it", kills)
	}
	// A run paused for a person (a safety trip) would wait for ever: bound it.
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	if out, err := exec.CommandContext(ctx, bin, "run", "-q", "-c", cfgPath).CombinedOutput(); err != nil && n < total {
		t.Fatalf("final run: %v\n%s", err, out)
	}
	if got := check("final"); got != total {
		t.Fatalf("%d points after %d kills, want %d (4 devices × %d)", got, kills, total, perDevice)
	}
	verify("final")

	st, err := store.Open(cfg.Store.Path, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	runs, err := st.Runs()
	if err != nil || len(runs) != 1 || runs[0].State != store.StateFinished {
		t.Fatalf("runs %+v, %v; want one finished run", runs, err)
	}
	pts, err := st.Points(runs[0].ID)
	if err != nil {
		t.Fatal(err)
	}
	count := map[string]int{}
	for _, p := range pts {
		count[p.Device]++
		// The device's window is made of its own samples: a clock that
		// went back across a restart, or a mix-up of devices, would not
		// give the window's count and mean.
		checkWindow(t, st, runs[0].ID, p.Device, p.DUT)
		checkWindow(t, st, runs[0].ID, "ref", p.Reference)
	}
	for _, d := range cfg.Devices {
		if count[d.Instrument] != perDevice {
			t.Errorf("%s: %d points, want %d", d.Instrument, count[d.Instrument], perDevice)
		}
	}
	t.Logf("%d kills (%d of %d points stored at the last); %d points of 4 devices, none lost or doubled; verify passes", kills, n, total, total)
}

// checkWindow recomputes a point's window from the instrument's stored
// samples over it.
func checkWindow(t *testing.T, st *store.Store, run store.RunID, instrument string, w analysis.Window) {
	t.Helper()
	n, sum := 0, 0.0
	if err := st.Samples(run, instrument, w.Start, w.End, func(s store.Sample) error {
		if !s.Failed {
			n++
			sum += s.Pa
		}
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	if n != w.Count || n == 0 || math.Abs(sum/float64(n)-w.Mean) > 1e-3 {
		t.Errorf("%s window %s … %s: %d samples, mean %.3f Pa; the point says %d, %.3f Pa",
			instrument, w.Start.Format(time.StampMilli), w.End.Format(time.StampMilli), n, sum/float64(max(n, 1)), w.Count, w.Mean)
	}
}

// keptPoints follows the points of the one run of a store across kills.
type keptPoints struct {
	path string
	seen map[string]bool // "device cycle/direction/kind/index" of every point seen so far
}

// check opens the store after a kill: it must pass bbolt's consistency
// check and hold at most one run (a restart resumes, it does not start
// anew), no point twice for any device and every point seen before. It
// returns how many points the run holds.
func (k *keptPoints) check(t *testing.T, stage string) int {
	t.Helper()
	st, err := store.Open(k.path, store.Options{Timeout: 5 * time.Second})
	if err != nil {
		t.Fatalf("%s: reopen: %v", stage, err)
	}
	defer st.Close()
	if err := st.Check(); err != nil {
		t.Fatalf("%s: store check: %v", stage, err)
	}
	runs, err := st.Runs()
	if err != nil || len(runs) > 1 {
		t.Fatalf("%s: runs %v, %v (a restart must resume, not start anew)", stage, runs, err)
	}
	if len(runs) == 0 {
		return 0
	}
	pts, err := st.Points(runs[0].ID)
	if err != nil {
		t.Fatal(err)
	}
	now := map[string]bool{}
	for _, p := range pts {
		key := p.Device + " " + procedure.PointKey(p)
		if now[key] {
			t.Fatalf("%s: point %s twice", stage, key)
		}
		now[key] = true
	}
	for key := range k.seen {
		if !now[key] {
			t.Fatalf("%s: point %s lost", stage, key)
		}
	}
	k.seen = now
	return len(pts)
}
