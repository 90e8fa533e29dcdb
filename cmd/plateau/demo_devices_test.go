package main

import (
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
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

// 'plateau sim --devices 3' serves three devices with the demo's invented
// errors; the configuration it prints names each on the one RTU line, and
// 'plateau probe' reads each device's own zero offset (the bench is vented)
// over the real transport.
func TestSimSeveralDevicesProbed(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the program as two processes")
	}
	bin := plateauBinary(t)
	cfgPath := startSim(t, bin, t.TempDir(), "--devices", "3", "--registers=false")
	cfg, err := config.Load(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	if len(cfg.Devices) != 3 {
		t.Fatalf("%d devices in the printed configuration, want 3", len(cfg.Devices))
	}
	mean := regexp.MustCompile(`mean (-?[0-9.]+) bar`)
	for i, d := range cfg.Devices {
		in := cfg.Instruments[d.Index]
		if in.Link.Kind != config.LinkModbusRTU || in.Link.UnitID != i+1 {
			t.Errorf("%s: %s unit %d, want the RTU line at unit %d", in.Name, in.Link.Kind, in.Link.UnitID, i+1)
		}
		out, err := exec.Command(bin, "-c", cfgPath, "probe", in.Name, "-n", "4").CombinedOutput()
		if err != nil {
			t.Fatalf("probe %s: %v\n%s", in.Name, err, out)
		}
		m := mean.FindStringSubmatch(string(out))
		if m == nil {
			t.Fatalf("probe %s: no mean:\n%s", in.Name, out)
		}
		got, _ := strconv.ParseFloat(m[1], 64)
		want, _ := strconv.ParseFloat(strings.TrimSuffix(demoDevices[i].zero, " bar"), 64)
		if math.Abs(got-want) > 0.006 { // its resolution (0.01 bar) and noise
			t.Errorf("%s reads %.3f bar vented, its zero offset is %s", in.Name, got, demoDevices[i].zero)
		}
	}
}
