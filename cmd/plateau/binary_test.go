package main

import (
	"os"
	"os/exec"
	"path/filepath"
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

func TestMain(m *testing.M) {
	code := m.Run()
	if builtBin != "" {
		os.RemoveAll(filepath.Dir(builtBin))
	}
	os.Exit(code)
}
