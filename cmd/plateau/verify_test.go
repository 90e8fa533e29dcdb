package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/store"
	"plateau/analysis"
)

func TestVerifyAndBackup(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "bench.db")
	st, err := store.Open(path, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	run, err := st.CreateRun("verify test", nil)
	if err != nil {
		t.Fatal(err)
	}
	at := time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC)
	w := analysis.Window{Mean: 1e5, Count: 10, Start: at, End: at.Add(30 * time.Second)}
	if _, _, err := st.AddPoint(run.ID, analysis.Point{Cycle: 1, Direction: analysis.Ascending, Kind: analysis.Measurement, Nominal: 1e5, Reference: w, DUT: w}); err != nil {
		t.Fatal(err)
	}
	if err := st.Close(); err != nil {
		t.Fatal(err)
	}

	out, err := runPlateau(t, "verify", "--store", path)
	if err != nil || !strings.Contains(out, "OK — 1 runs, 1 points, 1 unfinished") {
		t.Fatalf("verify: %v\n%s", err, out)
	}
	copyPath := filepath.Join(dir, "copy.db")
	if out, err := runPlateau(t, "backup", "--store", path, copyPath); err != nil {
		t.Fatalf("backup: %v\n%s", err, out)
	}
	if out, err := runPlateau(t, "verify", "--store", copyPath); err != nil || !strings.Contains(out, "1 points") {
		t.Fatalf("verify the copy: %v\n%s", err, out)
	}
	if _, err := runPlateau(t, "backup", "--store", path, copyPath); err == nil || !strings.Contains(err.Error(), "exists") {
		t.Fatalf("backup over an existing file: %v", err)
	}
	bad := filepath.Join(dir, "bad.db")
	if err := os.WriteFile(bad, []byte("not a store at all, just text"), 0o600); err != nil {
		t.Fatal(err)
	}
	if _, err := runPlateau(t, "verify", "--store", bad); err == nil {
		t.Fatal("verify accepted a file that is no store")
	}
}
