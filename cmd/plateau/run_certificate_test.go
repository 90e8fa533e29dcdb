package main

import (
	"os/exec"
	"path/filepath"
	"testing"

	"plateau/acquire/store"
	"plateau/config/record"
)

// Certificate fields given to one run at start are frozen into its record
// in place of the configuration's section; a field not given keeps it.
func TestRunFreezesCertificateFlags(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the program as a process")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "cert")
	out, err := exec.Command(bin, "run", "-q", "-c", cfgPath, "--certificate", "C-2026-0412", "--customer", "Example Works").CombinedOutput()
	if err != nil {
		t.Fatalf("run: %v\n%s", err, out)
	}
	st, err := store.Open(filepath.Join(dir, "cert.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	runs, err := st.Runs()
	if err != nil || len(runs) != 1 {
		t.Fatalf("runs %+v, %v", runs, err)
	}
	rec, err := record.Decode(runs[0].Record)
	if err != nil {
		t.Fatal(err)
	}
	c := rec.Info.Certificate
	if c.Number != "C-2026-0412" || c.Customer != "Example Works" {
		t.Errorf("frozen certificate %+v, want the number and customer given at start", c)
	}
}
