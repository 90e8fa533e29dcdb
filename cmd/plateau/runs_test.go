package main

import (
	"bytes"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"

	"plateau/acquire/api"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/units"
)

// goldenRun is an invented run of a 0–16 bar gauge resolving 0.01 bar.
func goldenRun() (api.RunDetail, []analysis.Point) {
	at := time.Date(2026, 3, 1, 21, 4, 5, 0, time.UTC)
	r := api.RunDetail{RunInfo: api.RunInfo{ID: "r000007", Label: "WO-1182", State: store.StateFinished, Reason: "every step done",
		Created: at, Updated: at.Add(2 * time.Hour)}, Points: 3}
	pt := func(dir analysis.Direction, nominal, ref, dut float64) analysis.Point {
		return analysis.Point{Cycle: 1, Direction: dir, Kind: analysis.Measurement, Nominal: nominal,
			Reference: analysis.Window{Mean: ref}, DUT: analysis.Window{Mean: dut}}
	}
	return r, []analysis.Point{
		pt(analysis.Ascending, 0, -3.2, 0),
		pt(analysis.Ascending, 8e5, 800012.3456789, 801000),
		pt(analysis.Descending, 16e5, 1599987.65, 1.6e6-1000),
	}
}

func TestPrintRunGolden(t *testing.T) {
	t.Setenv("TZ", "UTC")
	r, pts := goldenRun()
	cases := []struct {
		name string
		show display
		want string
	}{
		{"bar", display{unit: units.Bar, res: 1e3}, `run       r000007 "WO-1182"
state     finished: every step done
created   2026-03-01T21:04:05Z
changed   2026-03-01T23:04:05Z
points    3

  CYCLE  SERIES     KIND  NOMINAL bar  REFERENCE bar  DEVICE bar  DEVICE − REF bar
      1      up  measure         0.00          0.000       0.000            +0.000
      1      up  measure         8.00          8.000       8.010            +0.010
      1    down  measure        16.00         16.000      15.990            -0.010
`},
		// 0.01 bar is 0.145 psi (SP 811 B.8): one decimal, two for means.
		{"psi", display{unit: units.PSI, res: 1e3}, `run       r000007 "WO-1182"
state     finished: every step done
created   2026-03-01T21:04:05Z
changed   2026-03-01T23:04:05Z
points    3

  CYCLE  SERIES     KIND  NOMINAL psi  REFERENCE psi  DEVICE psi  DEVICE − REF psi
      1      up  measure          0.0           0.00        0.00             +0.00
      1      up  measure        116.0         116.03      116.18             +0.14
      1    down  measure        232.1         232.06      231.92             -0.14
`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var b bytes.Buffer
			printRun(&b, r, pts, c.show)
			if got := trimTrailing(b.String()); got != c.want {
				t.Errorf("got\n%s\nwant\n%s", got, c.want)
			}
		})
	}
}

func TestPrintStatusGolden(t *testing.T) {
	t.Setenv("TZ", "UTC")
	now := time.Date(2026, 3, 1, 22, 0, 0, 0, time.UTC)
	info := api.RunInfo{ID: "r000007", Label: "WO-1182", State: store.StateRunning}
	st := api.Status{Version: "1.2.0", Since: now.Add(-90 * time.Minute), Run: &info, State: "running",
		Step: "step 4 of 29, 2 of 24 points: cycle 1 up point 2", Progress: 2.0 / 24, PointsCaptured: 2, Unit: "bar", LastEventID: 41,
		Instruments: []api.InstrumentInfo{
			{Name: "ref", Role: "reference", Up: true, Reads: 1200, LastPa: 320004.5678, LastAt: now.Add(-time.Second), Settled: true},
			{Name: "dut", Role: "device", Up: false, Reads: 1180, LastPa: 1e-9, LastAt: now.Add(-3 * time.Second),
				Errors: map[string]uint64{"timeout": 3}, LastError: "read dut: timeout: no reply within 300ms"},
		}}
	var b bytes.Buffer
	printStatus(&b, st, display{unit: units.Bar, res: 1e3}, now)
	want := `daemon    plateau 1.2.0, up 1h30m0s
run       r000007 "WO-1182" running
progress  8 % — step 4 of 29, 2 of 24 points: cycle 1 up point 2
points    2 captured since the daemon started; last event 41

INSTRUMENT  ROLE       STATE  LAST READING                                SETTLED  READS  FAILED
ref         reference  up     3.20 bar (1s ago)                           yes      1200   0
dut         device     DOWN   0.00 bar (3s ago)                           no       1180   timeout 3
                              └ read dut: timeout: no reply within 300ms
`
	if got := trimTrailing(b.String()); got != want {
		t.Errorf("got\n%s\nwant\n%s", got, want)
	}
	if strings.Contains(b.String(), "step      step") {
		t.Error(`status prints "step step"`)
	}
}

// trimTrailing drops the spaces tabwriter leaves at line ends.
func trimTrailing(s string) string {
	lines := strings.Split(s, "\n")
	for i, l := range lines {
		lines[i] = strings.TrimRight(l, " ")
	}
	return strings.Join(lines, "\n")
}

func TestReportFormat(t *testing.T) {
	cases := []struct{ flag, output, want, err string }{
		{"", "-", "text", ""},
		{"", "r.html", "html", ""},
		{"", "R.HTM", "html", ""},
		{"", "r.txt", "text", ""},
		{"", "r.csv", "csv", ""},
		{"", "r.json", "json", ""},
		{"json", "-", "json", ""},
		{"HTML", "r.out", "html", ""},
		{"", "report", "", "give --format"},
		{"", "r.pdf", "", "names no report format"},
		{"pdf", "-", "", `--format "pdf"`},
	}
	for _, c := range cases {
		got, err := reportFormat(c.flag, c.output)
		if c.err != "" {
			if err == nil || !strings.Contains(err.Error(), c.err) {
				t.Errorf("%q %q: %v, want an error with %q", c.flag, c.output, err, c.err)
			}
			continue
		}
		if err != nil || got != c.want {
			t.Errorf("%q %q: %q %v, want %q", c.flag, c.output, got, err, c.want)
		}
	}
}

// The list names each run's devices: the identity of the one device, or
// how many and the first of several; a run of several shows each point's
// device.
func TestRunsNameTheDevices(t *testing.T) {
	t.Setenv("TZ", "UTC")
	r, pts := goldenRun()
	eight := make([]runDevice, 8)
	for i := range eight {
		eight[i] = runDevice{Name: "pt-" + strconv.Itoa(i+1), ID: "PT-100" + strconv.Itoa(i+1)}
	}
	var b bytes.Buffer
	printRuns(&b, []listedRun{{RunInfo: r.RunInfo, Devices: []runDevice{{ID: "PG-0417"}}}, {RunInfo: r.RunInfo, Devices: eight}, {RunInfo: r.RunInfo}})
	want := `RUN      STATE     CREATED           LAST CHANGE       DEVICES                 LABEL    REASON
r000007  finished  2026-03-01 21:04  2026-03-01 23:04  PG-0417                 WO-1182  every step done
r000007  finished  2026-03-01 21:04  2026-03-01 23:04  8: pt-1, pt-2, pt-3, …  WO-1182  every step done
r000007  finished  2026-03-01 21:04  2026-03-01 23:04  —                       WO-1182  every step done
`
	if got := trimTrailing(b.String()); got != want {
		t.Errorf("got\n%s\nwant\n%s", got, want)
	}

	text, err := os.ReadFile("../../testdata/config/devices.yaml")
	if err != nil {
		t.Fatal(err)
	}
	r.Config = string(text)
	for i := range pts {
		pts[i].Device = "pt-" + strconv.Itoa(i+1)
	}
	b.Reset()
	printRun(&b, r, pts, display{unit: units.Bar, res: 1e2})
	for _, want := range []string{
		"devices   pt-1 (PT-1001), pt-2 (PT-1002), pt-3 (PT-1003), pt-4 (PT-1004), pt-5 (PT-1005), pt-6 (PT-1006), pt-7 (PT-1007), pt-8 (PT-1008)\n",
		"  INSTRUMENT  CYCLE  SERIES     KIND  NOMINAL bar", "        pt-3      1    down  measure       16.000        15.9999     15.9900           -0.0099",
	} {
		if !strings.Contains(b.String(), want) {
			t.Errorf("run of several devices lacks %q:\n%s", want, b.String())
		}
	}
}
