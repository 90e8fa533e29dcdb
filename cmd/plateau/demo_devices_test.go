package main

import (
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"plateau/acquire/store"
	"plateau/config"
)

// plateau demo --devices 4 as a person types it: four invented devices
// calibrated in one run, each with its own result in the summary and none
// of its readings missed, the report written, the store consistent; and
// the configuration it writes is one plateau check accepts, with four
// devices of their own.
func TestDemoSeveralDevices(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the demo as a process")
	}
	bin := plateauBinary(t)
	dir := filepath.Join(t.TempDir(), "demo")
	out, err := exec.Command(bin, "demo", "--devices", "4", "--dir", dir).CombinedOutput()
	if err != nil {
		t.Fatalf("demo --devices 4: %v\n%s", err, out)
	}
	text := string(out)
	// One summary row per device, "  n  gauge-n  DEMO-PG16-n · …", its
	// last column the missed readings.
	rows := regexp.MustCompile(`(?m)^\s+\d\s+(gauge-\d)\s+DEMO-PG16-\d .*$`).FindAllStringSubmatch(text, -1)
	if len(rows) != 4 {
		t.Fatalf("%d device rows in the summary, want 4:\n%s", len(rows), text)
	}
	for _, r := range rows {
		if !strings.HasSuffix(strings.TrimSpace(r[0]), " none") {
			t.Errorf("%s missed readings: %s", r[1], r[0])
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "report.html")); err != nil {
		t.Errorf("no report: %v", err)
	}
	cfg, err := config.Load(filepath.Join(dir, "plateau.yaml"))
	if err != nil {
		t.Fatalf("the demo's configuration: %v", err)
	}
	ids := map[string]bool{}
	for _, d := range cfg.Devices {
		ids[d.Device.ID] = true
	}
	if len(cfg.Devices) != 4 || len(ids) != 4 || len(cfg.Simulator.Devices) != 4 {
		t.Errorf("demo configuration: %d devices, %d ids, %d simulated", len(cfg.Devices), len(ids), len(cfg.Simulator.Devices))
	}
	st, err := store.Open(filepath.Join(dir, "plateau.db"), store.Options{ReadOnly: true})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if err := st.Check(); err != nil {
		t.Errorf("store check: %v", err)
	}
	if out, err := exec.Command(bin, "demo", "--devices", "9", "--dir", dir).CombinedOutput(); err == nil || !strings.Contains(string(out), "--devices 9") {
		t.Errorf("demo --devices 9 accepted or unclear: %v\n%s", err, out)
	}
}
