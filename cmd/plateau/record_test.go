package main

import (
	"bytes"
	"context"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"plateau/acquire/api"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/config"
)

// shortRun makes the simulated bench's procedure short enough for a
// process test: three points, one cycle.
var shortRun = []string{
	"points: [0 %, 20 %, 40 %, 60 %, 80 %, 100 %]", "points: [0 %, 50 %, 100 %]",
	"cycles: 2", "cycles: 1",
}

// waitStatus polls the daemon's status until cond holds.
func waitStatus(t *testing.T, ctx context.Context, c *api.Client, what string, cond func(api.Status) bool) api.Status {
	t.Helper()
	for {
		st, err := c.Status(ctx)
		if err == nil && cond(st) {
			return st
		}
		if ctx.Err() != nil {
			t.Fatalf("%s: never (last status %+v, err %v)", what, st, err)
		}
		time.Sleep(50 * time.Millisecond)
	}
}

func stopDaemon(t *testing.T, d *exec.Cmd) {
	t.Helper()
	d.Process.Signal(syscall.SIGTERM)
	if err := d.Wait(); err != nil {
		t.Fatalf("daemon exit: %v", err)
	}
}

// A finished run's report, fetched again after its configuration file was
// edited and the environment overrides a key, is identical to the one made
// at the time: reports come from the record frozen with the run.
func TestReportComesFromTheFrozenRecord(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a calibration on the simulated bench")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "frozen", shortRun...)
	c := api.NewUnixClient(filepath.Join(dir, "frozen.sock"), "")
	ctx, cancel := context.WithTimeout(context.Background(), 120*time.Second)
	defer cancel()

	d := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "first.log"))
	waitReady(t, ctx, c)
	id, err := c.Start(ctx, api.StartRequest{Label: "frozen"})
	if err != nil {
		t.Fatal(err)
	}
	waitStatus(t, ctx, c, "run finished", func(s api.Status) bool { return s.Run == nil && s.Last != nil })
	var first bytes.Buffer
	if err := c.Report(ctx, id, "json", &first); err != nil {
		t.Fatal(err)
	}
	stopDaemon(t, d)

	// Edit the file (another class, another serial number) and override
	// the decision rule from the environment, then serve again.
	text := readFile(cfgPath)
	edited := strings.NewReplacer(`class: "1"`, `class: "2.5"`, "four-state", "guarded").Replace(text)
	if edited == text {
		t.Fatal("the edit changed nothing")
	}
	if err := os.WriteFile(cfgPath, []byte(edited), 0o644); err != nil {
		t.Fatal(err)
	}
	t.Setenv("PLATEAU_PROCEDURE_DECISION", "simple")
	d = startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "second.log"))
	waitReady(t, ctx, c)
	var again bytes.Buffer
	if err := c.Report(ctx, id, "json", &again); err != nil {
		t.Fatal(err)
	}
	stopDaemon(t, d)
	if first.String() != again.String() {
		t.Errorf("the report changed with the configuration:\nbefore %s\nafter  %s", first.String(), again.String())
	}
	if !strings.Contains(first.String(), "four-state") {
		t.Errorf("report does not carry the frozen decision rule: %s", first.String())
	}
}

// mountSmallDisk mounts a tmpfs of size bytes at dir and fills all but
// free bytes of it, so that the store runs out of space during a run.
func mountSmallDisk(t *testing.T, dir string, size, free int64) (filler string) {
	t.Helper()
	if err := syscall.Mount("tmpfs", dir, "tmpfs", 0, "size="+strconv.FormatInt(size, 10)); err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("mount a small tmpfs (CI runs as root): %v", err)
		}
		t.Skipf("cannot mount a small tmpfs here (%v): run as root", err)
	}
	t.Cleanup(func() { syscall.Unmount(dir, syscall.MNT_DETACH) })
	filler = filepath.Join(dir, "filler")
	if err := os.WriteFile(filler, make([]byte, size-free), 0o600); err != nil {
		t.Fatal(err)
	}
	return filler
}

// The store's disk fills during a run: the simulated source is vented, the
// run is paused with a reason naming the store, status and readiness say
// why, the daemon keeps serving; once space is freed a person resumes and
// the run completes, every point backed by its stored samples.
func TestFullDiskPausesAndResumes(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a calibration on the simulated bench")
	}
	dir := t.TempDir()
	disk := filepath.Join(dir, "disk")
	if err := os.Mkdir(disk, 0o755); err != nil {
		t.Fatal(err)
	}
	// 200 KiB are left: more than the start's estimate of what the run
	// writes, less than the store file grows to as it doubles.
	filler := mountSmallDisk(t, disk, 4<<20, 200<<10)
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "full")
	text := strings.Replace(readFile(cfgPath), "path: "+filepath.Join(dir, "full.db"), "path: "+filepath.Join(disk, "full.db"), 1)
	if err := os.WriteFile(cfgPath, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	c := api.NewUnixClient(filepath.Join(dir, "full.sock"), "")
	ctx, cancel := context.WithTimeout(context.Background(), 150*time.Second)
	defer cancel()
	d := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "daemon.log"))
	waitReady(t, ctx, c)
	id, err := c.Start(ctx, api.StartRequest{Label: "full disk"})
	if err != nil {
		t.Fatal(err)
	}
	st := waitStatus(t, ctx, c, "store fault reported", func(s api.Status) bool { return s.StoreFault != "" })
	t.Logf("store fault: %s", st.StoreFault)
	st = waitStatus(t, ctx, c, "run paused", func(s api.Status) bool { return s.State == string(store.StatePaused) })
	if !strings.Contains(st.Reason, "store") {
		t.Errorf("paused for %q, want the store named", st.Reason)
	}
	// The source was vented: the reference falls to the vented pressure.
	waitStatus(t, ctx, c, "vented", func(s api.Status) bool {
		for _, in := range s.Instruments {
			if in.Role == "reference" {
				return in.Up && in.LastPa < 0.2e5
			}
		}
		return false
	})
	if err := c.Ready(ctx); err == nil {
		t.Error("the daemon says it is ready while its store cannot write")
	}
	if err := c.Resume(ctx); err == nil || !strings.Contains(err.Error(), "store") {
		t.Errorf("resume with a full disk: %v, want a refusal naming the store", err)
	}
	// Free the space, wait until the store writes again, resume.
	if err := os.Remove(filler); err != nil {
		t.Fatal(err)
	}
	waitStatus(t, ctx, c, "store writes again", func(s api.Status) bool { return s.StoreFault == "" })
	if err := c.Resume(ctx); err != nil {
		t.Fatal(err)
	}
	waitStatus(t, ctx, c, "run finished", func(s api.Status) bool { return s.Run == nil && s.Last != nil })
	stopDaemon(t, d)
	pts := storedPoints(t, filepath.Join(disk, "full.db"), id, store.StateFinished)
	checkPointsBackedBySamples(t, cfgPath, filepath.Join(disk, "full.db"), id, pts)
}

// checkPointsBackedBySamples rebuilds every point's window count and mean
// from the samples stored over it: no point without its samples.
func checkPointsBackedBySamples(t *testing.T, cfgPath, path, id string, pts []analysis.Point) {
	t.Helper()
	cfg, err := config.Load(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(path, store.Options{Timeout: 5 * time.Second})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	rid, _ := store.ParseRunID(id)
	names := map[string]string{}
	for _, in := range cfg.Instruments {
		names[in.Role] = in.Name
	}
	if len(pts) == 0 {
		t.Fatal("no points")
	}
	for _, p := range pts {
		for role, w := range map[string]analysis.Window{config.RoleReference: p.Reference, config.RoleDevice: p.DUT} {
			n, sum := 0, 0.0
			if err := st.Samples(rid, names[role], w.Start, w.End, func(s store.Sample) error {
				if !s.Failed {
					n++
					sum += s.Pa
				}
				return nil
			}); err != nil {
				t.Fatal(err)
			}
			if n != w.Count || (n > 0 && math.Abs(sum/float64(n)-w.Mean) > 1e-3) {
				t.Errorf("cycle %d %s point %d %s: window of %d readings (mean %.4f Pa), the store holds %d over it",
					p.Cycle, p.Direction, p.Index+1, role, w.Count, w.Mean, n)
			}
		}
	}
}
