package recorded

import (
	"math"
	"os"
	"strings"
	"testing"

	"plateau/analysis"
	"plateau/analysis/balance"
)

// The balance of testdata/config/balance.yaml (an invented scenario),
// written out in SI units and standard uncertainties.
func testBalance() Balance {
	return Balance{
		Setup: balance.Setup{
			Mode: balance.Gauge,
			Piston: balance.Piston{AreaM2: 98.0665e-6, AreaU: 98.0665e-6 * 25e-6, Lambda: 0.5e-12, LambdaU: 0.25e-12,
				Alpha: 22.5e-6, AlphaU: 1e-6, RefTempC: 20, RefHeightM: 0.9},
			Pieces: []balance.Piece{
				{ID: "P1", Kind: balance.ConventionalMass, MassKg: 1.00003, MassU: 1e-5, Density: 7900},
				{ID: "M1", Kind: balance.ConventionalMass, MassKg: 0.99998, MassU: 1e-5},
				{ID: "M2", Kind: balance.ConventionalMass, MassKg: 2.00004, MassU: 2e-5},
				{ID: "M3", Kind: balance.ConventionalMass, MassKg: 4.00010, MassU: 4e-5},
				{ID: "M4", Kind: balance.ConventionalMass, MassKg: 3.99994, MassU: 4e-5},
				{ID: "M5", Kind: balance.ConventionalMass, MassKg: 4.00006, MassU: 4e-5},
			},
			Gravity: 9.81075, GravityU: 2.5e-5, MassesCorrelated: true,
		},
		Conditions: balance.Conditions{PistonTempU: 0.1, AirDensity: 1.19, AirDensityU: 0.015,
			DeviceHeight: 1.1, HeightU: 0.01 / math.Sqrt(3), Fluid: balance.Fluid{Density: 860, DensityU: 20 / math.Sqrt(3)}},
	}
}

func TestReadLoadings(t *testing.T) {
	f, err := os.Open("../../testdata/recorded/balance-loadings.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	b := testBalance()
	run, err := ReadLoadings(f, b)
	if err != nil {
		t.Fatal(err)
	}
	if len(run.Points) != 12 || len(run.Results) != 8 {
		t.Fatalf("%d points, %d results; want 12 and 8", len(run.Points), len(run.Results))
	}
	// The row's reference is what the balance gives for its loading and
	// piston temperature, at the dial's height.
	c := b.Conditions
	c.Loaded, c.PistonTempC = []string{"P1", "M1", "M2"}, 21.3
	want, err := b.Setup.Pressure(c)
	if err != nil {
		t.Fatal(err)
	}
	p := run.Points[2]
	if p.Reference.Mean != want.DevicePa || p.Nominal != 4e5 || p.DUT.Mean != 4e5 || p.Direction != analysis.Ascending ||
		p.Note != "" || p.Index != 1 || strings.Join(run.Results[0].Loaded, "+") != "P1+M1+M2" {
		t.Errorf("row 3: %+v, want reference %v", p, want.DevicePa)
	}
	// The dial is 20 cm above the piston: it sees about 0.0168 bar less
	// than the 4.0005 bar at the piston's level.
	if d := want.DevicePa - want.LevelPa; math.Abs(d-(-(860-1.19)*9.81075*0.2)) > 1e-9 {
		t.Errorf("head %v Pa", d)
	}
	for _, i := range []int{0, 1, 10, 11} {
		if p := run.Points[i]; p.Reference.Mean != 0 || p.Reference.Count != 1 {
			t.Errorf("vented row %d: reference %+v", i, p.Reference)
		}
	}
	if run.Points[0].Kind != analysis.ZeroBefore || run.Points[11].Kind != analysis.ZeroAfter {
		t.Errorf("zero rows: %v %v", run.Points[0].Kind, run.Points[11].Kind)
	}
	// The points evaluate like any recorded run.
	res, err := analysis.Analyze(run.Points, analysis.Device{UpperPa: 16e5, ResolutionPa: 5000, Accuracy: analysis.Accuracy{EN837Class: 1}},
		analysis.Reference{PercentOfReading: 0.01, K: 2}, analysis.Options{Rule: analysis.RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Points) == 0 {
		t.Fatal("no points analysed")
	}
}

// What a spreadsheet writes (byte-order mark, semicolons, decimal commas,
// quoted fields) reads the same as the plain table.
func TestLoadingsFromSpreadsheet(t *testing.T) {
	plain := "cycle,direction,nominal,loading,piston_temperature,dut,unit\n1,up,4,P1+M1+M2,21.3,4.00,bar\n1,down,4,P1+M1+M2,21.6,4.05,bar\n"
	sheet := "\ufeffCycle;Direction;Nominal;Loading;Piston_Temperature;DUT;Unit\r\n1;up;4;\"P1 + M1 + M2\";21,3;4,00;bar\r\n1;down;4;P1+M1+M2;21,6;4,05;bar\r\n"
	a, err := ReadLoadings(strings.NewReader(plain), testBalance())
	if err != nil {
		t.Fatal(err)
	}
	b, err := ReadLoadings(strings.NewReader(sheet), testBalance())
	if err != nil {
		t.Fatal(err)
	}
	for i := range a.Points {
		if a.Points[i].Reference.Mean != b.Points[i].Reference.Mean || a.Points[i].DUT.Mean != b.Points[i].DUT.Mean {
			t.Errorf("row %d: plain %+v, spreadsheet %+v", i, a.Points[i], b.Points[i])
		}
	}
}

// A piston temperature entered for the run stands in for the column.
func TestLoadingsEnteredTemperature(t *testing.T) {
	b := testBalance()
	b.TemperatureEntered, b.Conditions.PistonTempC = true, 21.3
	run, err := ReadLoadings(strings.NewReader("cycle,direction,nominal,loading,dut,unit\n1,up,4,P1+M1+M2,4.00,bar\n"), b)
	if err != nil {
		t.Fatal(err)
	}
	c := b.Conditions
	c.Loaded = []string{"P1", "M1", "M2"}
	want, _ := b.Setup.Pressure(c)
	if run.Points[0].Reference.Mean != want.DevicePa {
		t.Errorf("reference %v, want %v", run.Points[0].Reference.Mean, want.DevicePa)
	}
}

// Every bad field is reported at once, by line, column letter and header.
func TestLoadingsProblems(t *testing.T) {
	table := `cycle,direction,nominal,loading,piston_temperature,dut,unit,kind
1,up,4,P1+M9,21.3,4.00,bar,
1,up,8,P1++M1,21.3,8.00,bar,
1,up,12,P1+M1+M2,,12.00,bar,
1,up,16,P1+M1+M1,21.3,16.00,bar,
1,,,P1,,0.00,bar,zero-after
1,up,4,P1+M1+M2,warm,4.00,bar,
`
	_, err := ReadLoadings(strings.NewReader(table), testBalance())
	if err == nil {
		t.Fatal("no error")
	}
	for _, want := range []string{
		"table of loadings: 6 problems",
		`line 2, column D (loading): piece "M9" is not in the mass set (P1, M1, M2, M3, M4, M5)`,
		`line 3, column D (loading): "P1++M1": piece 2 is empty`,
		"line 4, column E (piston_temperature): is required: the piston temperature in °C",
		"line 5, column D (loading): piece M1 is loaded twice",
		"line 6, column D (loading): a zero reading is taken with the balance vented",
		`line 7, column E (piston_temperature): "warm" is not a temperature in °C`,
	} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("missing %q in\n%v", want, err)
		}
	}
	for _, tc := range []struct{ table, want string }{
		{"cycle,direction,nominal,dut,unit\n", `header lacks the required column "loading"`},
		{"cycle,direction,nominal,loading,dut,unit\n", `header lacks the required column "piston_temperature"`},
		{"cycle,direction,nominal,loading,piston_temperature,dut,unit,reference\n", `column H (reference): unknown column "reference"`},
		{"", "table of loadings: empty"},
		{"cycle,direction,nominal,loading,piston_temperature,dut,unit\n", "has a header but no readings"},
	} {
		if tc.want == "has a header but no readings" {
			b := testBalance()
			if _, err := ReadLoadings(strings.NewReader(tc.table), b); err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("%q: %v, want %q", tc.table, err, tc.want)
			}
			continue
		}
		if _, err := ReadLoadings(strings.NewReader(tc.table), testBalance()); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%q: %v, want %q", tc.table, err, tc.want)
		}
	}
	bad := testBalance()
	bad.Setup.Gravity = 0
	if _, err := ReadLoadings(strings.NewReader("cycle\n"), bad); err == nil || !strings.Contains(err.Error(), "pressure balance: gravity 0") {
		t.Errorf("a bad setup: %v", err)
	}
}

func TestIsLoadings(t *testing.T) {
	for _, tc := range []struct {
		table string
		want  bool
	}{
		{"cycle,direction,nominal,loading,dut,unit\n", true},
		{"\ufeffcycle;Loading;dut\n", true},
		{"cycle,direction,nominal,reference,dut,unit\n", false},
		{"", false},
	} {
		if got := IsLoadings(strings.NewReader(tc.table)); got != tc.want {
			t.Errorf("%q: %v, want %v", tc.table, got, tc.want)
		}
	}
}

// FuzzReadLoadings: any bytes give points or an error, never a panic; what
// is read is finite and every measurement read under load has its result.
func FuzzReadLoadings(f *testing.F) {
	f.Add("cycle,direction,nominal,loading,piston_temperature,dut,unit\n1,up,4,P1+M1+M2,21.3,4.00,bar\n")
	f.Add("\ufeffcycle;direction;nominal;loading;piston_temperature;dut;unit\n1;up;4;\"P1+M1\";21,3;4,00;bar\n1;;;;;0;bar;\n")
	f.Add("cycle,direction,nominal,loading,piston_temperature,dut,unit,kind\n1,,,,,0,bar,zero-before\n1,up,0,,20,0,bar,\n")
	f.Add("cycle,loading\n\"1,P1\n")
	b := testBalance()
	f.Fuzz(func(t *testing.T, s string) {
		run, err := ReadLoadings(strings.NewReader(s), b)
		if err != nil {
			return
		}
		measured := 0
		for _, p := range run.Points {
			if math.IsNaN(p.Reference.Mean) || math.IsInf(p.Reference.Mean, 0) || math.IsNaN(p.DUT.Mean) {
				t.Fatalf("non-finite point %+v", p)
			}
			if p.Kind == analysis.Measurement {
				measured++
			}
		}
		if len(run.Results) > measured {
			t.Fatalf("%d measurements, %d results", measured, len(run.Results))
		}
		for _, r := range run.Results {
			if len(r.Loaded) == 0 || math.IsNaN(r.U) || r.U < 0 {
				t.Fatalf("result %+v", r)
			}
		}
	})
}
