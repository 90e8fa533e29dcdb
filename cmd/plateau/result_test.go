package main

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/procedure"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/config"
	"plateau/config/record"
)

// A run of several devices is evaluated device by device, each with its
// own frozen description: the summary names every device (one without
// points says so), the HTML summary links one report per device, and the
// daemon's report selects a device. The errors are a scenario of our own.
func TestSeveralDevicesAreReportedEach(t *testing.T) {
	cfg, err := config.Load("../../testdata/config/devices.yaml")
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	st, err := store.Open(filepath.Join(dir, "devices.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	run, err := st.CreateFrozenRun("eight transmitters", nil, record.Of(cfg).Encode())
	if err != nil {
		t.Fatal(err)
	}
	offsets := map[string]float64{"pt-1": 0.002e5, "pt-2": 0.09e5} // pt-2 far out of its class
	at := time.Unix(1.8e9, 0)
	for _, s := range procedure.Plan(cfg.Procedure, cfg.Device.LowerPa) {
		if s.Kind != procedure.StepCapture {
			continue
		}
		for name, off := range offsets {
			at = at.Add(time.Minute)
			w := analysis.Window{Mean: s.TargetPa, StdDev: 1, Count: 20, Start: at.Add(-10 * time.Second), End: at}
			d := w
			d.Mean += off
			p := analysis.Point{Cycle: s.Cycle, Direction: s.Direction, Kind: s.PointKind, Index: s.Index, Nominal: s.TargetPa,
				Reference: w, DUT: d, Device: name}
			if _, _, err := st.AddPoint(run.ID, p); err != nil {
				t.Fatal(err)
			}
		}
	}
	if _, err := st.SetState(run.ID, store.StateFinished, "every step done"); err != nil {
		t.Fatal(err)
	}
	all, err := evaluateAll(st, run.ID)
	if err != nil {
		t.Fatal(err)
	}
	if len(all) != len(cfg.Devices) {
		t.Fatalf("%d results for %d devices", len(all), len(cfg.Devices))
	}
	verdict := map[string]analysis.Outcome{}
	for _, r := range all {
		if !r.Empty {
			verdict[r.Device] = r.Result.Decision
		}
	}
	if verdict["pt-1"] != analysis.Pass || verdict["pt-2"] != analysis.Fail || len(verdict) != 2 {
		t.Fatalf("verdicts %v, want pt-1 pass and pt-2 fail only", verdict)
	}
	var text bytes.Buffer
	if err := printResult(&text, all...); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"DEVICES UNDER TEST", "PT-1001", "PT-1002", "no points captured", "════ device pt-2 ════"} {
		if !strings.Contains(text.String(), want) {
			t.Errorf("text report lacks %q", want)
		}
	}
	path := filepath.Join(dir, "report.html")
	if err := writeHTMLReport(path, all...); err != nil {
		t.Fatal(err)
	}
	summary, _ := os.ReadFile(path)
	for _, f := range []string{"report-pt-1.html", "report-pt-2.html"} {
		if !strings.Contains(string(summary), f) {
			t.Errorf("summary does not link %s", f)
		}
		if _, err := os.Stat(filepath.Join(dir, f)); err != nil {
			t.Error(err)
		}
	}
	var one bytes.Buffer
	if err := daemonReport(st, cfg)("json", &one, run.ID.String(), "pt-2"); err != nil {
		t.Fatal(err)
	}
	var doc map[string]any
	if err := json.Unmarshal(one.Bytes(), &doc); err != nil {
		t.Fatalf("one device's JSON: %v", err)
	}
	if !strings.Contains(one.String(), "PT-1002") || strings.Contains(one.String(), "PT-1001") {
		t.Error("the report for pt-2 is not pt-2's alone")
	}
	if err := daemonReport(st, cfg)("csv", &one, run.ID.String(), ""); err == nil {
		t.Error("a CSV of several devices without choosing one was accepted")
	}
}
