package main

import (
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
)

var (
	buildOnce sync.Once
	builtBin  string
	buildErr  error
	buildOut  []byte
)

// plateauBinary builds the program once per test run, for tests that must
// run it as a real process (signals, kills, a second process).
func plateauBinary(t *testing.T) string {
	t.Helper()
	buildOnce.Do(func() {
		dir, err := os.MkdirTemp("", "plateau-bin-")
		if err != nil {
			buildErr = err
			return
		}
		builtBin = filepath.Join(dir, "plateau")
		buildOut, buildErr = exec.Command("go", "build", "-o", builtBin, ".").CombinedOutput()
	})
	if buildErr != nil {
		t.Fatalf("build: %v\n%s", buildErr, buildOut)
	}
	return builtBin
}

// simConfig writes the simulated-bench example configuration to
// dir/name.yaml with its store (name.db) and socket (name.sock) in dir and
// the clock at 60×, applies further old/new text replacements, and returns
// the file's path.
func simConfig(t *testing.T, dir, name string, replace ...string) string {
	t.Helper()
	text, err := os.ReadFile("../../testdata/config/sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	pairs := append([]string{
		"path: plateau-sim.db", "path: " + filepath.Join(dir, name+".db"),
		"socket: plateau-sim.sock", "socket: " + filepath.Join(dir, name+".sock"),
		"speed: 20", "speed: 60",
	}, replace...)
	out := strings.NewReplacer(pairs...).Replace(string(text))
	path := filepath.Join(dir, name+".yaml")
	if err := os.WriteFile(path, []byte(out), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestMain(m *testing.M) {
	code := m.Run()
	if builtBin != "" {
		os.RemoveAll(filepath.Dir(builtBin))
	}
	os.Exit(code)
}
