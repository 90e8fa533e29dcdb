package recorded

import (
	"encoding/json"
	"math"
	"strings"
	"testing"
	"time"

	"plateau/analysis"
)

// A small invented run (demo data of our own) in mixed column order and case.
const sample = `# bench sheet, gauge 0-10 bar
Unit,Cycle,Direction,Nominal,Reference,DUT,kind,time,note
bar,1,,,0.0000,0.001,zero-before,2025-03-01T20:00:00Z,
bar,1,up,0,0.0000,0.000,,2025-03-01T20:01:00Z,
bar,1,up,5,5.0010,5.004,,2025-03-01T20:02:00Z,
kPa,1,up,1000,1000.05,1000.6,,2025-03-01T20:03:00Z,tapped twice
bar,1,down,10,10.0005,10.006,,2025-03-01T20:04:00Z,
bar,1,down,5,5.0000,5.007,,2025-03-01T20:05:00Z,

bar,1,down,0,0.0000,0.002,,2025-03-01T20:06:00Z,
bar,1,,,0.0000,0.002,zero-after,2025-03-01T20:07:00Z,
`

func TestReadSample(t *testing.T) {
	pts, err := Read(strings.NewReader(sample))
	if err != nil {
		t.Fatal(err)
	}
	if len(pts) != 8 {
		t.Fatalf("%d points, want 8", len(pts))
	}
	p := pts[3]
	if p.Kind != analysis.Measurement || p.Direction != analysis.Ascending || p.Cycle != 1 || p.Index != 2 ||
		p.Nominal != 1e6 || math.Abs(p.Reference.Mean-1000050) > 1e-6 || math.Abs(p.DUT.Mean-1000600) > 1e-6 ||
		p.Note != "tapped twice" || p.DUT.Count != 1 || !p.Reference.Start.Equal(time.Date(2025, 3, 1, 20, 3, 0, 0, time.UTC)) {
		t.Errorf("row 4: %+v", p)
	}
	if pts[0].Kind != analysis.ZeroBefore || pts[7].Kind != analysis.ZeroAfter || pts[4].Index != 2 || pts[5].Index != 1 {
		t.Errorf("kinds or indices wrong: %+v", pts)
	}
	res, err := analysis.Analyze(pts,
		analysis.Device{UpperPa: 1e6, ResolutionPa: 100, Accuracy: analysis.Accuracy{EN837Class: 0.25}},
		analysis.Reference{PercentOfReading: 0.01, FloorPa: 20, K: 2}, analysis.Options{Rule: analysis.RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Points) != 3 || math.Abs(res.Zero.DeviationPa-100) > 1e-9 {
		t.Errorf("analysed %d points, f0 %g", len(res.Points), res.Zero.DeviationPa)
	}
}

func TestReadErrors(t *testing.T) {
	const head = "cycle,direction,nominal,reference,dut,unit\n"
	for _, c := range []struct {
		name, in, want string
	}{
		{"empty", "", "empty table"},
		{"header only", head, "no readings"},
		{"unknown column", "cycle,direction,nominal,reference,dut,unit,colour\n", "line 1, column G (colour): unknown column \"colour\""},
		{"duplicate column", "cycle,cycle,direction,nominal,reference,dut,unit\n", "appears twice"},
		{"missing column", "cycle,direction,nominal,reference,unit\n", "required column \"dut\""},
		{"bad cycle", head + "1,up,0,0,0,bar\nx,up,0,0,0,bar\n", "line 3, column A (cycle)"},
		{"zero cycle", head + "0,up,0,0,0,bar\n", "(cycle): \"0\""},
		{"bad direction", head + "1,sideways,0,0,0,bar\n", "line 2, column B (direction)"},
		{"blank direction", head + "1,,0,0,0,bar\n", "(direction)"},
		{"bad number", head + "1,up,0,1.2.3,0,bar\n", "line 2, column D (reference): \"1.2.3\""},
		{"NaN", head + "1,up,0,0,NaN,bar\n", "(dut): \"NaN\""},
		{"Inf", head + "1,up,0,Inf,0,bar\n", "(reference)"},
		{"overflow", head + "1,up,0,1e308,0,MPa\n", "too large"},
		{"blank nominal", head + "1,up,,0,0,bar\n", "(nominal)"},
		{"unknown unit", head + "1,up,0,0,0,furlong\n", "line 2, column F (unit): unknown pressure unit"},
		{"short row", head + "1,up,0,0,0\n", "line 2: 5 fields, but the header has 6"},
		{"bad kind", "cycle,direction,nominal,reference,dut,unit,kind\n1,up,0,0,0,bar,spare\n", "(kind)"},
		{"bad time", "cycle,direction,nominal,reference,dut,unit,time\n1,up,0,0,0,bar,yesterday\n", "(time)"},
		{"bad quote", head + "1,up,0,\"0,0,bar\n", "recorded run"},
		{"sd without samples", "cycle,direction,nominal,reference,dut,unit,reference_sd\n1,up,0,0,0,bar,0.001\n", "needs reference_samples"},
		{"bad samples", "cycle,direction,nominal,reference,dut,unit,reference_sd,reference_samples\n1,up,0,0,0,bar,0.001,many\n", "line 2, column H (reference_samples)"},
		{"negative sd", "cycle,direction,nominal,reference,dut,unit,reference_sd,reference_samples\n1,up,0,0,0,bar,-0.001,5\n", "must be ≥ 0"},
		{"sd of one sample", "cycle,direction,nominal,reference,dut,unit,reference_sd,reference_samples\n1,up,0,0,0,bar,0.001,1\n", "0 for a single sample"},
	} {
		_, err := Read(strings.NewReader(c.in))
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one containing %q", c.name, err, c.want)
		}
	}
}

// The window columns carry the reference's scatter into the budget's
// reference-noise term (s/√n, ν = n − 1; common practice).
func TestReadReferenceWindow(t *testing.T) {
	in := "cycle,direction,nominal,reference,dut,unit,reference_sd,reference_samples\n" +
		"1,up,0,0,0,bar,,\n1,up,4,4.0001,4.01,bar,0.0004,16\n"
	pts, err := Read(strings.NewReader(in))
	if err != nil {
		t.Fatal(err)
	}
	if w := pts[1].Reference; w.Count != 16 || math.Abs(w.StdDev-40) > 1e-9 {
		t.Errorf("window %+v, want 16 samples, SD 40 Pa", w)
	}
	if w := pts[0].Reference; w.Count != 1 || w.StdDev != 0 {
		t.Errorf("blank window %+v, want one sample", w)
	}
}

func FuzzRead(f *testing.F) {
	f.Add(sample)
	f.Add("cycle,direction,nominal,reference,dut,unit,reference_sd,reference_samples\n1,up,4,4,4.01,bar,0.0004,16\n")
	f.Add("cycle,direction,nominal,reference,dut,unit\n1,up,0,0,0,bar\n")
	f.Add("cycle,direction,nominal,reference,dut,unit,kind\n1,,,0,0,psi,zero-after\n")
	f.Add("cycle,direction\n\"")
	f.Add("\ufeffcycle;direction;nominal;reference;dut;unit\n1;up;4;4,0001;4,01;bar\n")
	f.Add("cycle\tdirection\tnominal\treference\tdut\tunit\n1\tup\t4\t4\t4.01\tbar\n")
	f.Fuzz(func(t *testing.T, in string) {
		pts, err := Read(strings.NewReader(in))
		if err != nil {
			if pts != nil {
				t.Fatal("points returned with an error")
			}
			return
		}
		if len(pts) == 0 {
			t.Fatal("no points and no error")
		}
		for _, p := range pts {
			for _, v := range []float64{p.Nominal, p.Reference.Mean, p.DUT.Mean, p.Reference.StdDev} {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					t.Fatalf("non-finite value in %+v", p)
				}
			}
			if p.Cycle < 1 || p.Index < 0 || p.Reference.Count < 1 || p.Reference.StdDev < 0 || (p.Reference.Count == 1 && p.Reference.StdDev != 0) {
				t.Fatalf("bad point %+v", p)
			}
			if p.Kind == analysis.Measurement && p.Direction != analysis.Ascending && p.Direction != analysis.Descending {
				t.Fatalf("measurement without direction %+v", p)
			}
		}
		// Whatever was read, analysis must answer with a result or an error, never a panic.
		// A result must always encode: JSON has no NaN or Inf.
		res, err := analysis.Analyze(pts, analysis.Device{UpperPa: 1e6, ResolutionPa: 1, Accuracy: analysis.Accuracy{EN837Class: 1}},
			analysis.Reference{FloorPa: 10, K: 2}, analysis.Options{Rule: analysis.RuleFourState})
		if err == nil {
			if _, err := json.Marshal(res); err != nil {
				t.Fatalf("result does not encode: %v", err)
			}
		}
	})
}

// A table as a spreadsheet in a decimal-comma locale exports it (UTF-8
// byte-order mark, semicolons, decimal commas, quoted fields) gives the same
// points as the plain table.
func TestReadSpreadsheetExport(t *testing.T) {
	plain, err := Read(strings.NewReader(sample))
	if err != nil {
		t.Fatal(err)
	}
	export := "\ufeff" + `# bench sheet, gauge 0-10 bar
Unit;Cycle;Direction;Nominal;Reference;DUT;kind;time;note
bar;1;;;0,0000;0,001;zero-before;2025-03-01T20:00:00Z;
bar;1;up;0;0,0000;0,000;;2025-03-01T20:01:00Z;
"bar";1;up;5;"5,0010";5,004;;2025-03-01T20:02:00Z;
kPa;1;up;1000;1000,05;1000,6;;2025-03-01T20:03:00Z;"tapped twice"
bar;1;down;10;10,0005;10,006;;2025-03-01T20:04:00Z;
bar;1;down;5;5,0000;5,007;;2025-03-01T20:05:00Z;

bar;1;down;0;0,0000;0,002;;2025-03-01T20:06:00Z;
bar;1;;;0,0000;0,002;zero-after;2025-03-01T20:07:00Z;
`
	got, err := Read(strings.NewReader(export))
	if err != nil {
		t.Fatal(err)
	}
	a, _ := json.Marshal(plain)
	b, _ := json.Marshal(got)
	if string(a) != string(b) {
		t.Errorf("spreadsheet export differs from the plain table:\n%s\n%s", b, a)
	}
	tab := strings.ReplaceAll(strings.ReplaceAll(export, ";", "\t"), "\"", "")
	if got, err := Read(strings.NewReader(tab)); err != nil {
		t.Errorf("tab-separated: %v", err)
	} else if b, _ := json.Marshal(got); string(a) != string(b) {
		t.Errorf("tab-separated export differs:\n%s", b)
	}
}

// Every bad field is reported in one pass, each by line, column letter
// and header.
func TestReadReportsEveryProblem(t *testing.T) {
	in := "cycle;direction;nominal;reference;dut;unit\n" +
		"1;up;0;0;0;bar\n" +
		"x;up;4;4,01;4;bar\n" +
		"1;sideways;8;8;8,0,1;bar\n" +
		"1;up;12;12;12\n"
	_, err := Read(strings.NewReader(in))
	if err == nil {
		t.Fatal("no error")
	}
	for _, want := range []string{"4 problems", "line 3, column A (cycle)", "line 4, column B (direction)",
		"line 4, column E (dut): \"8,0,1\"", "line 5: 5 fields, but the header has 6"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("missing %q in\n%v", want, err)
		}
	}
}

func TestLetters(t *testing.T) {
	for i, want := range map[int]string{0: "A", 25: "Z", 26: "AA", 27: "AB", 51: "AZ", 52: "BA", 701: "ZZ", 702: "AAA"} {
		if got := letters(i); got != want {
			t.Errorf("letters(%d) = %q, want %q", i, got, want)
		}
	}
}
