package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/api"
	"plateau/acquire/procedure"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/report"
	"plateau/config"
	"plateau/config/record"
)

// severalDevicesStore writes a finished run of the eight-transmitter
// bench of testdata/config/devices.yaml to a store file at path: pt-1
// reads 2 mbar high (within its class), pt-2 0.09 bar high (far out of
// it), and the other six have no point. The errors are a scenario of our
// own.
func severalDevicesStore(t *testing.T, path string) (*config.Config, store.RunID) {
	t.Helper()
	cfg, err := config.Load("../../testdata/config/devices.yaml")
	if err != nil {
		t.Fatal(err)
	}
	text, err := os.ReadFile("../../testdata/config/devices.yaml")
	if err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(path, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	run, err := st.CreateFrozenRun("eight transmitters", text, record.Of(cfg).Encode())
	if err != nil {
		t.Fatal(err)
	}
	offsets := []struct {
		name string
		pa   float64
	}{{"pt-1", 0.002e5}, {"pt-2", 0.09e5}}
	at := time.Unix(1.8e9, 0)
	for _, s := range procedure.Plan(cfg.Procedure, cfg.Device.LowerPa) {
		if s.Kind != procedure.StepCapture {
			continue
		}
		for _, o := range offsets {
			at = at.Add(time.Minute)
			w := analysis.Window{Mean: s.TargetPa, StdDev: 1, Count: 20, Start: at.Add(-10 * time.Second), End: at}
			d := w
			d.Mean += o.pa
			p := analysis.Point{Cycle: s.Cycle, Direction: s.Direction, Kind: s.PointKind, Index: s.Index, Nominal: s.TargetPa,
				Reference: w, DUT: d, Device: o.name}
			if _, _, err := st.AddPoint(run.ID, p); err != nil {
				t.Fatal(err)
			}
		}
	}
	if _, err := st.SetState(run.ID, store.StateFinished, "every step done"); err != nil {
		t.Fatal(err)
	}
	if err := st.Check(); err != nil {
		t.Fatalf("store consistency: %v", err)
	}
	return cfg, run.ID
}

// A run of several devices is evaluated device by device, each with its
// own frozen description: the text names every device in a summary, then
// gives each one's report (one without points says so); the HTML report is
// one document; the daemon's report selects a device, and every format
// takes a run of several.
func TestSeveralDevicesAreReportedEach(t *testing.T) {
	dir := t.TempDir()
	cfg, id := severalDevicesStore(t, filepath.Join(dir, "devices.db"))
	st, err := store.Open(filepath.Join(dir, "devices.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	all, err := evaluateAll(st, id)
	if err != nil {
		t.Fatal(err)
	}
	if len(all.Devices) != len(cfg.Devices) {
		t.Fatalf("%d results for %d devices", len(all.Devices), len(cfg.Devices))
	}
	verdict := map[string]analysis.Outcome{}
	for _, d := range all.Devices {
		if d.Missing == "" {
			verdict[d.Info.DeviceName()] = d.Result.Decision
		}
	}
	if verdict["pt-1"] != analysis.Pass || verdict["pt-2"] != analysis.Fail || len(verdict) != 2 {
		t.Fatalf("verdicts %v, want pt-1 pass and pt-2 fail only", verdict)
	}
	var text bytes.Buffer
	if err := printResult(&text, all); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"8 DEVICES UNDER TEST", "PT-1001 · Example Instruments PT-16 · serial S7001", "PT-1002",
		"NO RESULT: no reading of this device was captured", "════ device 2 of 8: pt-2 ════", "════ device 8 of 8: pt-8 ════", "VERDICT: FAIL"} {
		if !strings.Contains(text.String(), want) {
			t.Errorf("text report lacks %q:\n%s", want, text.String())
		}
	}
	path := filepath.Join(dir, "report.html")
	if err := writeHTMLReport(path, all); err != nil {
		t.Fatal(err)
	}
	page, _ := os.ReadFile(path)
	if n := strings.Count(string(page), `<section class="device" id="device-pt-`); n != 8 {
		t.Errorf("the document has %d device sections, want 8", n)
	}
	if files, _ := filepath.Glob(filepath.Join(dir, "*.html")); len(files) != 1 {
		t.Errorf("the report is %d files, want one document: %v", len(files), files)
	}

	render := daemonReport(st, cfg)
	var one bytes.Buffer
	if err := render("json", &one, id.String(), "pt-2"); err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Device string
		Result struct{ Decision string }
	}
	if err := json.Unmarshal(one.Bytes(), &doc); err != nil {
		t.Fatalf("one device's JSON: %v", err)
	}
	if doc.Device != "pt-2" || doc.Result.Decision != "fail" || strings.Contains(one.String(), "PT-1001") {
		t.Errorf("the report for pt-2 is not pt-2's alone: device %q, decision %q", doc.Device, doc.Result.Decision)
	}
	var csv bytes.Buffer
	if err := render("csv", &csv, id.String(), ""); err != nil {
		t.Fatalf("CSV of every device: %v", err)
	}
	rows := strings.Split(strings.TrimSpace(csv.String()), "\n")
	if !strings.HasPrefix(rows[0], "device,point,") || strings.Count(csv.String(), "\npt-1,") != 11 || strings.Count(csv.String(), "\npt-2,") != 11 {
		t.Errorf("CSV of every device: want a device column and 11 rows each of pt-1 and pt-2:\n%s", csv.String())
	}
	for _, c := range []struct {
		format, device string
		want           error
	}{{"html", "pt-9", api.ErrNotFound}, {"pdf", "", api.ErrInvalid}} {
		err := render(c.format, &one, id.String(), c.device)
		if !errors.Is(err, c.want) {
			t.Errorf("format %s device %q: error %v, want %v", c.format, c.device, err, c.want)
		}
	}
	if err := render("text", &one, id.String(), "pt-9"); err == nil || !strings.Contains(err.Error(), "its devices: pt-1, pt-2, pt-3") {
		t.Errorf("an unknown device: %v, want the list of the run's devices", err)
	}
}

// The daemon's report, read back from its JSON, renders exactly as the
// report made from the store: through the daemon, text and one device's
// report are made this way.
func TestReportFromTheDaemonsJSONIsTheSame(t *testing.T) {
	dir := t.TempDir()
	_, id := severalDevicesStore(t, filepath.Join(dir, "devices.db"))
	st, err := store.Open(filepath.Join(dir, "devices.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	direct, err := evaluateAll(st, id)
	if err != nil {
		t.Fatal(err)
	}
	var doc bytes.Buffer
	if err := renderReport(&doc, "json", direct); err != nil {
		t.Fatal(err)
	}
	ds, err := report.ReadJSON(&doc)
	if err != nil {
		t.Fatal(err)
	}
	again := &runResult{ID: id, Devices: ds}
	for _, format := range reportFormats {
		var a, b bytes.Buffer
		if err := renderReport(&a, format, direct); err != nil {
			t.Fatal(err)
		}
		if err := renderReport(&b, format, again); err != nil {
			t.Fatal(err)
		}
		if a.String() != b.String() {
			t.Errorf("%s: the report read back from JSON differs from the store's", format)
		}
	}
}
