package main

import (
	"bytes"
	"crypto/sha256"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/store"
	"plateau/analysis"
)

// writeStore makes a store with one run, one point and some samples.
func writeStore(t *testing.T, path string) {
	t.Helper()
	st, err := store.Open(path, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	run, err := st.CreateRun("verify test", nil)
	if err != nil {
		t.Fatal(err)
	}
	at := time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC)
	for i := range 500 {
		bar := 1 + float64(i%7)/1e5
		if err := st.Put(run.ID, "reference", store.Sample{Time: at.Add(time.Duration(i) * 50 * time.Millisecond), Raw: bar, Pa: bar * 1e5, RawUnit: "bar"}); err != nil {
			t.Fatal(err)
		}
	}
	w := analysis.Window{Mean: 123456.75, Count: 10, Start: at, End: at.Add(30 * time.Second)}
	if _, _, err := st.AddPoint(run.ID, analysis.Point{Cycle: 1, Direction: analysis.Ascending, Kind: analysis.Measurement, Nominal: 1e5, Reference: w, DUT: w}); err != nil {
		t.Fatal(err)
	}
	if err := st.Close(); err != nil {
		t.Fatal(err)
	}
}

type dirState map[string][32]byte

// snapshot hashes every file of dir, so a test sees any file created,
// changed or removed.
func snapshot(t *testing.T, dir string) dirState {
	t.Helper()
	out := dirState{}
	entries, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		b, err := os.ReadFile(filepath.Join(dir, e.Name()))
		if err != nil {
			t.Fatal(err)
		}
		out[e.Name()] = sha256.Sum256(b)
	}
	return out
}

func (d dirState) equal(o dirState) bool {
	if len(d) != len(o) {
		return false
	}
	for k, v := range d {
		if o[k] != v {
			return false
		}
	}
	return true
}

// verify only reads: every case leaves its folder exactly as it was.
func TestVerifyOnlyReads(t *testing.T) {
	good := filepath.Join(t.TempDir(), "good.db")
	writeStore(t, good)
	orig, err := os.ReadFile(good)
	if err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name string
		file func(dir string) string
		ok   string // in the output when it passes
		bad  string // in the error when it fails
	}{
		{"a good store", func(dir string) string { return put(t, dir, orig) }, "OK — 1 run, 1 point, 1 unfinished", ""},
		{"a missing file", func(dir string) string { return filepath.Join(dir, "none.db") }, "", "no such file"},
		{"a folder", func(dir string) string { return dir }, "", "not a regular file"},
		{"an empty file", func(dir string) string { return put(t, dir, nil) }, "", "empty"},
		{"a text file", func(dir string) string { return put(t, dir, bytes.Repeat([]byte("text "), 400)) }, "", "not a plateau store"},
		{"a digit changed inside a point", func(dir string) string {
			b := bytes.Clone(orig)
			i := bytes.LastIndex(b, []byte("123456.75"))
			b[i+3] = '9'
			return put(t, dir, b)
		}, "", "checksum"},
		{"truncated", func(dir string) string { return put(t, dir, orig[:len(orig)/3]) }, "", "truncated"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			path := tc.file(dir)
			before := snapshot(t, dir)
			out, err := runPlateau(t, "verify", "--store", path)
			if tc.ok != "" {
				if err != nil || !strings.Contains(out, tc.ok) {
					t.Fatalf("verify: %v\n%s", err, out)
				}
			} else if err == nil || !strings.Contains(err.Error(), tc.bad) {
				t.Fatalf("verify: %v, want an error with %q\n%s", err, tc.bad, out)
			}
			if !snapshot(t, dir).equal(before) {
				t.Error("verify changed, created or removed a file")
			}
		})
	}
}

func put(t *testing.T, dir string, b []byte) string {
	t.Helper()
	p := filepath.Join(dir, "store.db")
	if err := os.WriteFile(p, b, 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

// verify, as a process, on a copy that cannot be written: mode 0400 and,
// where the file system allows it, the immutable attribute (which stops
// root too).
func TestVerifyReadOnlyCopy(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "copy.db")
	writeStore(t, path)
	if err := os.Chmod(path, 0o400); err != nil {
		t.Fatal(err)
	}
	if out, err := exec.Command("chattr", "+i", path).CombinedOutput(); err == nil {
		t.Cleanup(func() { exec.Command("chattr", "-i", path).Run() })
		if f, err := os.OpenFile(path, os.O_WRONLY, 0); err == nil {
			f.Close()
			t.Fatal("an immutable file opened for writing")
		}
	} else {
		t.Logf("chattr +i not available here (%s): mode 0400 only", strings.TrimSpace(string(out)))
	}
	before := snapshot(t, dir)
	out, err := exec.Command(plateauBinary(t), "verify", "--store", path).CombinedOutput()
	if err != nil || !strings.Contains(string(out), "OK — 1 run, 1 point") {
		t.Fatalf("verify a read-only copy: %v\n%s", err, out)
	}
	if !snapshot(t, dir).equal(before) {
		t.Error("verify changed the folder")
	}
}

func TestVerifyAndBackup(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "bench.db")
	writeStore(t, path)
	copyPath := filepath.Join(dir, "copy.db")
	if out, err := runPlateau(t, "backup", "--store", path, copyPath); err != nil {
		t.Fatalf("backup: %v\n%s", err, out)
	}
	if out, err := runPlateau(t, "verify", "--store", copyPath); err != nil || !strings.Contains(out, "1 point,") {
		t.Fatalf("verify the copy: %v\n%s", err, out)
	}
	if _, err := runPlateau(t, "backup", "--store", path, copyPath); err == nil || !strings.Contains(err.Error(), "exists") {
		t.Fatalf("backup over an existing file: %v", err)
	}
}

// A damaged store: verify names the salvage command, salvage copies what
// reads into a new file, and the new file verifies.
func TestSalvageCommand(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "bench.db")
	writeStore(t, path)
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	b[bytes.LastIndex(b, []byte("123456.75"))+3] = '9'
	if err := os.WriteFile(path, b, 0o600); err != nil {
		t.Fatal(err)
	}
	_, err = runPlateau(t, "verify", "--store", path)
	if err == nil || !strings.Contains(err.Error(), "plateau salvage --store "+path) {
		t.Fatalf("verify of a damaged store: %v", err)
	}
	saved := filepath.Join(dir, "saved.db")
	out, err := runPlateau(t, "salvage", "--store", path, saved)
	if err != nil || !strings.Contains(out, "1 run (0 rebuilt), 0 points") || !strings.Contains(out, "checksum") {
		t.Fatalf("salvage: %v\n%s", err, out)
	}
	if out, err := runPlateau(t, "verify", "--store", saved); err != nil || !strings.Contains(out, "OK — 1 run, 0 points, 1 unfinished") {
		t.Fatalf("verify the salvaged store: %v\n%s", err, out)
	}
	if _, err := runPlateau(t, "salvage", "--store", path, saved); err == nil {
		t.Fatal("salvage over an existing file")
	}
}

// plateau serve, as a process, refuses a damaged, empty or foreign store
// with the reason (and, for damage, the salvage command), never a panic,
// and leaves the file as it was.
func TestServeRefusesDamagedStore(t *testing.T) {
	if testing.Short() {
		t.Skip("starts the daemon")
	}
	bin := plateauBinary(t)
	good := filepath.Join(t.TempDir(), "good.db")
	writeStore(t, good)
	orig, err := os.ReadFile(good)
	if err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name   string
		damage func([]byte) []byte
		want   string
	}{
		{"truncated", func(b []byte) []byte { return b[:len(b)/3] }, "truncated"},
		{"a digit changed inside a point", func(b []byte) []byte {
			b[bytes.LastIndex(b, []byte("123456.75"))+3] = '9'
			return b
		}, "checksum"},
		{"meta page flipped", func(b []byte) []byte { b[40] ^= 0xFF; return b }, "meta page 0 is damaged"},
		{"empty", func([]byte) []byte { return []byte{} }, "empty"},
		{"text", func([]byte) []byte { return bytes.Repeat([]byte("text "), 1000) }, "not a plateau store"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			cfg := simConfig(t, dir, "dmg")
			path := filepath.Join(dir, "dmg.db")
			if err := os.WriteFile(path, tc.damage(bytes.Clone(orig)), 0o600); err != nil {
				t.Fatal(err)
			}
			before := sha256.Sum256(mustRead(t, path))
			cmd := exec.Command(bin, "serve", "-c", cfg)
			done := make(chan struct{})
			timer := time.AfterFunc(60*time.Second, func() { cmd.Process.Kill(); close(done) })
			out, err := cmd.CombinedOutput()
			timer.Stop()
			select {
			case <-done:
				t.Fatalf("serve kept running on a bad store:\n%s", out)
			default:
			}
			text := string(out)
			if err == nil || !strings.Contains(text, tc.want) || !strings.Contains(text, path) ||
				strings.Contains(text, "panic") || strings.Contains(text, "goroutine ") {
				t.Fatalf("serve: %v, want a refusal with %q and the file name\n%s", err, tc.want, out)
			}
			if tc.want != "empty" && tc.want != "not a plateau store" && !strings.Contains(text, "plateau salvage --store "+path) {
				t.Errorf("serve does not name the salvage command:\n%s", out)
			}
			if sha256.Sum256(mustRead(t, path)) != before {
				t.Error("serve changed the store it refused")
			}
		})
	}
}

func mustRead(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func TestCountedNouns(t *testing.T) {
	for _, tc := range []struct {
		n    int
		noun string
		want string
	}{
		{0, "run", "0 runs"},
		{1, "run", "1 run"},
		{2, "point", "2 points"},
		{1, "sample block", "1 sample block"},
		{12, "sample block", "12 sample blocks"},
	} {
		if got := counted(tc.n, tc.noun); got != tc.want {
			t.Errorf("counted(%d, %q) = %q, want %q", tc.n, tc.noun, got, tc.want)
		}
	}
}
