package main

import (
	"os/exec"
	"regexp"
	"testing"
	"time"

	"plateau/acquire"
	"plateau/acquire/poll"
	"plateau/analysis/units"
)

// The bar shows the engine's own estimate in wall time: on a simulated bench
// running 60× faster, a minute of clock time is a second at the terminal.
func TestProgressLineShowsEngineEstimate(t *testing.T) {
	show := display{unit: units.Bar, res: 1e3}
	for _, tc := range []struct {
		name  string
		st    acquire.Status
		speed float64
		want  string
	}{
		{"real time", acquire.Status{Phase: "cycle 1 up point 2", TargetPa: 2e5, Steps: 10, Estimated: true, StepLeft: 90 * time.Second, RunLeft: 20 * time.Minute}, 1, " · step ~1m30s, run ~20m left"},
		{"simulated 60×", acquire.Status{Phase: "cycle 1 up point 2", TargetPa: 2e5, Steps: 10, Estimated: true, StepLeft: 60 * time.Second, RunLeft: time.Hour}, 60, " · step ~1s, run ~1m left"},
		{"no estimate", acquire.Status{Phase: "free run", Instruments: []poll.State{{Name: "dut"}}}, 1, "free run → "},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got := progressLine(tc.st, show, tc.speed)
			if !regexp.MustCompile(regexp.QuoteMeta(tc.want)).MatchString(got) {
				t.Errorf("progressLine = %q, want it to contain %q", got, tc.want)
			}
			if !tc.st.Estimated && regexp.MustCompile(`left`).MatchString(got) {
				t.Errorf("progressLine = %q shows a time left without an estimate", got)
			}
		})
	}
}

// A foreground run that picks up an interrupted one says where it resumes.
func TestForegroundRunSaysWhereItResumes(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the program as a process")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "resume")
	cmd := exec.Command(bin, "run", "-q", "-c", cfgPath)
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	time.Sleep(1500 * time.Millisecond)
	cmd.Process.Kill()
	cmd.Wait()
	out, err := exec.Command(bin, "run", "-q", "-c", cfgPath).CombinedOutput()
	if err != nil {
		t.Fatalf("second run: %v\n%s", err, out)
	}
	if !regexp.MustCompile(`(?m)^resuming r\d+ at step \d+ of \d+$`).Match(out) {
		t.Errorf("second run does not say where it resumes:\n%s", out)
	}
}
