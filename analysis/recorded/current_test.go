package recorded

import (
	"errors"
	"math"
	"strings"
	"testing"

	"plateau/analysis"
)

// A transmitter recorded in mA on 0–10 bar: p = (I − 4)/16 × 10 bar
// (REFERENCES.md §7), so 3.70 mA is −0.1875 bar, 12.008 mA 5.005 bar and
// 20.016 mA 10.010 bar; the 3.70 mA zero is kept and flagged under range
// (NE 43 band 3.8–20.5 mA).
func TestCurrentTable(t *testing.T) {
	const rows = "1,up,0,0,3.70,bar,mA\n1,up,5,5,12.008,bar,mA\n1,up,10,10,20.016,bar,mA\n"
	const header = "cycle,direction,nominal,reference,dut,unit,dut_unit\n"
	ten := &Loop{LowerPa: 0, UpperPa: 10e5}
	cases := []struct {
		name  string
		table string
		loop  *Loop
		want  string // an error fragment, or "" for the points below
	}{
		{"range in the table", "# current_loop: 0 bar … 10 bar\n" + header + rows, nil, ""},
		{"range in kPa with a comma", "# written at the bench\n#current_loop: 0 kPa, 1000 kPa\n" + header + rows, nil, ""},
		{"range given", header + rows, ten, ""},
		{"both agree", "# current_loop: 0 bar .. 10 bar\n" + header + rows, ten, ""},
		{"spreadsheet export", "\ufeff# current_loop: 0 bar … 10 bar\ncycle;direction;nominal;reference;dut;unit;dut_unit\n1;up;0;0;3,70;bar;mA\n1;up;5;5;12,008;bar;mA\n1;up;10;10;20,016;bar;mA\n", nil, ""},
		{"both differ", "# current_loop: 0 bar … 16 bar\n" + header + rows, ten, `"# current_loop: 0 bar … 16 bar" differs from the loop range given (0.00 bar … 10.00 bar)`},
		// The range given is said in the table's unit, in fixed notation.
		{"differ in psi", "# current_loop: 0 psi … 100 psi\n" + header + rows, ten, `differs from the loop range given (0.0 psi … 145.0 psi)`},
		{"no range", header + rows, nil, `line 2, column G (dut_unit): a current in mA needs the loop range`},
		{"bad range", "# current_loop: 10 bar … 0 bar\n" + header + rows, nil, "upper range value must be above"},
		{"not a current", header + "1,up,0,0,3.70,bar,kPa\n", ten, `line 2, column G (dut_unit): "kPa": dut_unit is for a transmitter's output current`},
		{"not a number", header + "1,up,0,0,three,bar,mA\n", ten, `line 2, column E (dut): "three" is not a number`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			pts, loop, err := ReadWith(strings.NewReader(c.table), Options{Loop: c.loop})
			if c.want != "" {
				if err == nil || !strings.Contains(err.Error(), c.want) {
					t.Fatalf("err %v, want %q", err, c.want)
				}
				if errors.Is(err, ErrNeedsLoop) != (c.name == "no range") {
					t.Errorf("errors.Is(ErrNeedsLoop) = %v", errors.Is(err, ErrNeedsLoop))
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if loop == nil || math.Abs(loop.UpperPa-10e5) > 1e-6 || loop.LowerPa != 0 {
				t.Fatalf("loop %+v", loop)
			}
			want := []struct {
				pa  float64
				sig analysis.Signal
			}{{-0.1875e5, analysis.SignalUnderRange}, {5.005e5, analysis.SignalNone}, {10.010e5, analysis.SignalNone}}
			for i, w := range want {
				if math.Abs(pts[i].DUT.Mean-w.pa) > 1e-6 || pts[i].Signal != w.sig {
					t.Errorf("row %d: %g Pa %q, want %g Pa %q", i+1, pts[i].DUT.Mean, pts[i].Signal, w.pa, w.sig)
				}
			}
		})
	}
}

// A table of pressures is read as before, with no loop; a blank dut_unit
// is the row's unit.
func TestDutUnitBlank(t *testing.T) {
	pts, loop, err := ReadWith(strings.NewReader("cycle,direction,nominal,reference,dut,unit,dut_unit\n1,up,8,8,8.02,bar,\n"), Options{})
	if err != nil || loop != nil {
		t.Fatal(err, loop)
	}
	if pts[0].DUT.Mean != 8.02e5 || pts[0].Signal != "" {
		t.Errorf("points %+v", pts)
	}
}

// Whatever the table, a loop range in force or not: no panic, and a good
// table gives finite pressures.
func FuzzReadWith(f *testing.F) {
	f.Add("# current_loop: 0 bar … 10 bar\ncycle,direction,nominal,reference,dut,unit,dut_unit\n1,up,0,0,3.70,bar,mA\n", true)
	f.Add("cycle,direction,nominal,reference,dut,unit,dut_unit\n1,up,0,0,1e308,bar,mA\n", true)
	f.Add("#current_loop:1e308 bar,-1e308 bar\ncycle", false)
	f.Fuzz(func(t *testing.T, in string, given bool) {
		opt := Options{}
		if given {
			opt.Loop = &Loop{LowerPa: -1e5, UpperPa: 9e5}
		}
		pts, _, err := ReadWith(strings.NewReader(in), opt)
		if err != nil {
			return
		}
		for _, p := range pts {
			if math.IsNaN(p.DUT.Mean) || math.IsInf(p.DUT.Mean, 0) {
				t.Fatalf("non-finite DUT %v", p.DUT.Mean)
			}
		}
	})
}
