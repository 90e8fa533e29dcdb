package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// transmitterMA is an invented as-found transmitter run recorded in mA
// (see the file's header): its zero reads 3.70 mA.
const transmitterMA = "../../testdata/recorded/transmitter-ma.csv"

// analyze evaluates a transmitter's table in mA: the output in mA per
// reading and point, the 3.70 mA zero flagged and evaluated (−0.30 mA is
// −1.875 % of the 16 mA span, REFERENCES.md §7), and the loop range from
// the table, a flag or neither.
func TestAnalyzeCurrents(t *testing.T) {
	abs := filepath.Join(mustWd(t), transmitterMA)
	gauge := filepath.Join(mustWd(t), deadweight)
	noRange := filepath.Join(t.TempDir(), "no-range.csv")
	data, err := os.ReadFile(abs)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(noRange, []byte(strings.Replace(string(data), "# current_loop: 0 bar … 10 bar\n", "", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	t.Chdir(t.TempDir())
	flags := []string{"--rule", "simple", "--upper", "10 bar", "--resolution", "0.001 bar", "--class", "0.25", "--ref-uncertainty", "0.01 %",
		"--loop-meter-uncertainty", "0.01 %", "--loop-meter-floor", "0.001 mA", "--loop-meter-resolution", "0.001 mA"}
	cases := []struct {
		name    string
		args    []string
		want    []string
		wantErr string
	}{
		{"range from the table", append([]string{"analyze", abs}, flags...),
			[]string{"loop meter U = 0.01 % of reading + 0.001 mA (k = 2), resolution 0.001 mA", "1      1    up       0.0000    4.0000       3.7000   -0.3000      -1.875 %  under-range",
				"output verdict: FAIL", "the output read 3.700 mA, below the NE 43 measuring band"}, ""},
		{"range from the flag", append([]string{"analyze", noRange, "--current-loop", "0 bar … 10 bar"}, flags...), []string{"3.7000   -0.3000      -1.875 %  under-range"}, ""},
		{"json", append([]string{"analyze", abs, "--format", "json"}, flags...), []string{`"output": {`, `"measured_ma": 3.7`, `"signal": "under-range"`}, ""},
		{"ranges differ", append([]string{"analyze", abs, "--current-loop", "0 bar … 16 bar"}, flags...), nil, "differs from the loop range given"},
		{"no range", append([]string{"analyze", noRange}, flags...), nil, "column G (dut_unit): a current in mA needs the loop range"},
		{"loop range is not the device range", []string{"analyze", abs, "--rule", "simple", "--upper", "16 bar", "--resolution", "0.001 bar", "--class", "0.25", "--ref-uncertainty", "0.01 %"},
			nil, "differs from the device range"},
		{"meter without currents", append([]string{"analyze", gauge}, flags...), nil, "this table holds no current"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			out, err := runPlateau(t, c.args...)
			if c.wantErr != "" {
				if err == nil || !strings.Contains(err.Error(), c.wantErr) {
					t.Fatalf("err %v, want %q\n%s", err, c.wantErr, out)
				}
				return
			}
			if err != nil {
				t.Fatalf("%v\n%s", err, out)
			}
			for _, w := range c.want {
				if !strings.Contains(out, w) {
					t.Errorf("output lacks %q:\n%s", w, out)
				}
			}
		})
	}
}
