package main

import (
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"plateau/acquire/api"
	"plateau/acquire/store"
)

// A technician's day on the simulated bench, as processes: a run in the
// foreground; runs, report and verify on the store with no daemon; then the
// daemon: status shows the last run and its verdict, start says how long a
// run takes, status shows the target, the settle rule and the time left,
// pause says the pressure is held, backup copies the store and verify checks
// it while the daemon runs, tail names the device of each point. No output meant for a person
// holds scientific notation.
func TestTechniciansDayAsProcesses(t *testing.T) {
	if testing.Short() {
		t.Skip("runs two calibrations and the daemon as processes")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "day",
		"points: [0 %, 20 %, 40 %, 60 %, 80 %, 100 %]", "points: [0 %, 50 %, 100 %]",
		"cycles: 2", "cycles: 1", "exercise: 1", "exercise: 0")
	ctx, cancel := context.WithTimeout(context.Background(), 4*time.Minute)
	defer cancel()
	plateau := func(args ...string) string {
		t.Helper()
		line := "plateau " + strings.Join(args, " ")
		cmd := exec.CommandContext(ctx, bin, append([]string{"-c", cfgPath}, args...)...)
		cmd.Env, cmd.Dir = cleanEnv(), dir
		out, err := cmd.CombinedOutput()
		if err != nil {
			t.Fatalf("%s: %v\n%s", line, err, out)
		}
		checkHuman(t, line, string(out))
		return string(out)
	}
	has := func(line, out string, want ...string) {
		t.Helper()
		for _, w := range want {
			if !regexp.MustCompile(w).MatchString(out) {
				t.Errorf("%s: no %q in\n%s", line, w, out)
			}
		}
	}

	has("run", plateau("run"), `VERDICT: `)
	has("runs", plateau("runs"), `r000001\s+finished`)
	has("runs last", plateau("runs", "last"), `CYCLE`)
	has("report last", plateau("report", "last"), `VERDICT: `)
	has("verify", plateau("verify"), `OK — 1 run,`)

	d := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "serve.log"))
	c := api.NewUnixClient(filepath.Join(dir, "day.sock"), "")
	waitReady(t, ctx, c)
	has("status after a restart", plateau("status"), `last run  r000001 finished`, `verdict   (PASS|FAIL|CONDITIONAL)`, `a run     \d+ steps, at least`)
	has("start", plateau("start"), `run r000002 started: \d+ steps, at least \S+, at most`)
	waitStatus(t, ctx, c, "a capture step", func(st api.Status) bool {
		return st.Current != nil && st.Current.Phase != "" && st.Current.Estimated
	})
	has("status while running", plateau("status"), `run       r000002 running since`, `target    \d+\.\d\d bar; settled when steady over 10s`, `left      this step ~`)
	has("pause", plateau("pause"), `paused at step \d+ of \d+; the pressure is held`)
	has("status while paused", plateau("status"), `r000002 paused since \d\d:\d\d:\d\d`)
	has("backup", plateau("backup", filepath.Join(dir, "copy.db")), `.`)
	has("verify the copy", plateau("verify", "--store", filepath.Join(dir, "copy.db")), `OK — 2 runs`)
	has("verify while the daemon runs", plateau("verify"), `the running daemon's store: OK — 2 runs, \d+ points, 1 unfinished`)
	plateau("resume")
	waitStatus(t, ctx, c, "the run to end", func(st api.Status) bool { return st.Run == nil && st.Last != nil && st.Last.ID == "r000002" })
	has("status after the run", plateau("status"), `last run  r000002 finished`, `verdict   `)

	out := tailFor(ctx, bin, cfgPath, 200, 3*time.Second)
	checkHuman(t, "plateau tail", string(out))
	has("tail", string(out), `r000002 dut\s+captured cycle 1 up point 1: reference \d+\.\d\d bar, device \d+\.\d\d bar`)
	stopDaemon(t, d)
}

// A run with no points yet: report says so plainly, on the store and
// through the daemon, and the daemon does not fail at it.
func TestReportOfARunWithoutPoints(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the program and the daemon as processes")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "empty")
	st, err := store.Open(filepath.Join(dir, "empty.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	yaml, err := os.ReadFile(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	run, err := st.CreateRun("nothing captured", yaml)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := st.SetState(run.ID, store.StateStopped, "stopped by operator"); err != nil {
		t.Fatal(err)
	}
	if err := st.Close(); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	report := func(how string) {
		t.Helper()
		cmd := exec.CommandContext(ctx, bin, "-c", cfgPath, "report", "last")
		cmd.Env = cleanEnv()
		out, err := cmd.CombinedOutput()
		if err == nil || !strings.Contains(string(out), "r000001 has no captured points yet (stopped: stopped by operator): nothing to evaluate") ||
			strings.Contains(string(out), "failed") || strings.Contains(string(out), "500") {
			t.Errorf("report of a run without points, %s: %v\n%s", how, err, out)
		}
	}
	report("on the store")
	d := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "serve.log"))
	waitReady(t, ctx, api.NewUnixClient(filepath.Join(dir, "empty.sock"), ""))
	report("through the daemon")
	stopDaemon(t, d)
}

// Everything a person reads of a demo run: what demo prints, and the text
// of the HTML report it writes (its tables and the labels of its charts,
// not their drawing instructions), in fixed notation.
func TestDemoHasNoScientificNotation(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a whole demo calibration")
	}
	dir := t.TempDir()
	cmd := exec.Command(plateauBinary(t), "demo", "--dir", filepath.Join(dir, "demo"))
	cmd.Env, cmd.Dir = cleanEnv(), dir
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("demo: %v\n%s", err, out)
	}
	checkHuman(t, "plateau demo", string(out))
	html, err := os.ReadFile(filepath.Join(dir, "demo", "report.html"))
	if err != nil {
		t.Fatal(err)
	}
	text := regexp.MustCompile(`(?s)<(script|style)\b.*?</(script|style)>`).ReplaceAllString(string(html), " ")
	text = regexp.MustCompile(`<[^>]*>`).ReplaceAllString(text, " ")
	if !strings.Contains(text, "VERDICT") && !strings.Contains(strings.ToUpper(text), "PASS") {
		t.Fatalf("the report's text holds no verdict:\n%.2000s", text)
	}
	checkHuman(t, "the demo's report.html", text)
}
