package main

import (
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// 'plateau sim' prints a configuration for the bench it serves, and
// 'plateau probe' accepts it and reads every instrument in it over the real
// transports (Modbus TCP, Modbus RTU on a pseudo-terminal).
func TestSimConfigIsProbed(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the program as two processes")
	}
	bin := plateauBinary(t)
	cfgPath := startSim(t, bin, t.TempDir())
	for _, name := range []string{"sim-reference", "sim-device"} {
		out, err := exec.Command(bin, "-c", cfgPath, "probe", name, "-n", "4").CombinedOutput()
		if err != nil {
			t.Fatalf("probe %s: %v\n%s", name, err, out)
		}
		if !strings.Contains(string(out), "4 of 4 reads good") {
			t.Fatalf("probe %s did not read 4 good values:\n%s", name, out)
		}
	}
}

// startSim runs 'plateau sim --write dir/sim.yaml' with args as a process
// until the test ends (then SIGINT, which must stop it cleanly) and returns
// the path of the configuration it wrote.
func startSim(t *testing.T, bin, dir string, args ...string) string {
	t.Helper()
	cfgPath := filepath.Join(dir, "sim.yaml")
	sim := exec.Command(bin, append([]string{"sim", "--write", cfgPath}, args...)...)
	sim.Dir = dir
	logPath := filepath.Join(dir, "sim.log")
	logFile, err := os.Create(logPath)
	if err != nil {
		t.Fatal(err)
	}
	sim.Stdout, sim.Stderr = logFile, logFile // a file: no copying goroutine to race with
	simOut := func() string { b, _ := os.ReadFile(logPath); return string(b) }
	if err := sim.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		defer logFile.Close()
		sim.Process.Signal(syscall.SIGINT)
		done := make(chan error, 1)
		go func() { done <- sim.Wait() }()
		select {
		case err := <-done:
			if err != nil {
				t.Errorf("sim did not stop cleanly: %v\n%s", err, simOut())
			}
		case <-time.After(10 * time.Second):
			sim.Process.Kill()
			t.Error("sim did not stop on SIGINT")
		}
	})
	deadline := time.Now().Add(10 * time.Second)
	for {
		if b, err := os.ReadFile(cfgPath); err == nil && len(b) > 0 && strings.Contains(simOut(), "written") {
			return cfgPath
		}
		if time.Now().After(deadline) {
			t.Fatalf("no configuration written:\n%s", simOut())
		}
		time.Sleep(50 * time.Millisecond)
	}
}
