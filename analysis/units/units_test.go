package units

import (
	"math"
	"strings"
	"testing"
)

// Factors to the pascal as printed in NIST SP 811 (2008), Appendix B.8,
// rounded there to 7 significant digits; our exact values must round to them.
func TestFactorsAgainstNISTSP811(t *testing.T) {
	cases := []struct {
		unit    Unit
		printed float64 // SP 811 B.8 printed factor
		exact   bool    // the factor is exact by definition, not just rounded
	}{
		{Kilopascal, 1e3, true},
		{Megapascal, 1e6, true},
		{Bar, 1.0e5, true},            // SP 811 B.8 "bar", exact
		{Millibar, 1.0e2, true},       // SP 811 B.8 "millibar", exact
		{Atmosphere, 1.01325e5, true}, // SP 811 B.8 "atmosphere, standard", exact
		{KgfPerCm2, 9.80665e4, true},  // SP 811 B.8 "kilogram-force per square centimeter", exact
		{PSI, 6.894757e3, false},      // SP 811 B.8 "pound-force per square inch"
		{Torr, 1.333224e2, false},     // SP 811 B.8 "torr"
		{MmHg, 1.333224e2, false},     // SP 811 B.8 "millimeter of mercury, conventional"
		{InHg, 3.386389e3, false},     // SP 811 B.8 "inch of mercury, conventional"
		{InH2O, 2.490889e2, false},    // SP 811 B.8 "inch of water, conventional"
		{MmH2O, 9.80665, true},        // SP 811 B.8 "millimeter of water, conventional", exact
	}
	for _, c := range cases {
		t.Run(c.unit.Symbol, func(t *testing.T) {
			if c.exact {
				if c.unit.Pa != c.printed {
					t.Fatalf("%s: %v Pa, want exactly %v", c.unit.Symbol, c.unit.Pa, c.printed)
				}
				return
			}
			rel := math.Abs(c.unit.Pa-c.printed) / c.printed
			if rel > 5e-7 { // 7 significant digits
				t.Fatalf("%s: %.10g Pa does not round to SP 811's %v (rel %g)", c.unit.Symbol, c.unit.Pa, c.printed, rel)
			}
		})
	}
	// Full values re-derived from the exact definitions (REFERENCES.md §5, [X]).
	full := []struct {
		unit Unit
		want float64
	}{
		{PSI, 6894.757293168361},
		{Torr, 133.32236842105263},
		{MmHg, 133.322387415},
		{InHg, 3386.38864034100},
		{InH2O, 249.08891},
	}
	for _, f := range full {
		if math.Abs(f.unit.Pa-f.want)/f.want > 1e-13 {
			t.Errorf("%s: %.15g, want %.15g", f.unit.Symbol, f.unit.Pa, f.want)
		}
	}
}

func TestParseQuantity(t *testing.T) {
	cases := []struct {
		in      string
		wantPa  float64
		percent float64
		isPct   bool
		errFrag string
	}{
		{in: "16 bar", wantPa: 1.6e6},
		{in: "16bar", wantPa: 1.6e6},
		{in: "-0.5 kPa", wantPa: -500},
		{in: "1e3 Pa", wantPa: 1000},
		{in: "2.5E-1 MPa", wantPa: 250000},
		{in: "100 psi", wantPa: 689475.7293168361},
		{in: "1 kgf/cm2", wantPa: 98066.5},
		{in: "760 Torr", wantPa: 101325},
		{in: "0.25 %", isPct: true, percent: 0.25},
		{in: "0.25%", isPct: true, percent: 0.25},
		{in: "16", errFrag: "no unit"},
		{in: "bar", errFrag: "does not start with a number"},
		{in: "", errFrag: "empty"},
		{in: "16 furlongs", errFrag: "unknown pressure unit"},
		// Case is a prefix for m and M (SI brochure: m = milli, M = mega).
		{in: "50 mPa", errFrag: "m is milli and M is mega"},
		{in: "5 Mbar", errFrag: "m is milli and M is mega"},
		{in: "5 mpa", errFrag: "m is milli and M is mega"},
		{in: "5 MPA", wantPa: 5e6},
		{in: "5 MBAR", wantPa: 500},
		{in: "5 mmhg", wantPa: 5 * 133.322387415},
		{in: "5 torr", wantPa: 5 * 101325.0 / 760},
		{in: "5 KPA", wantPa: 5000},
		{in: "1e999 bar", errFrag: "bad number"},
	}
	for _, c := range cases {
		t.Run(c.in, func(t *testing.T) {
			q, err := ParseQuantity(c.in)
			if c.errFrag != "" {
				if err == nil || !strings.Contains(err.Error(), c.errFrag) {
					t.Fatalf("err = %v, want fragment %q", err, c.errFrag)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if c.isPct {
				if !q.Percent || q.Value != c.percent {
					t.Fatalf("got %+v", q)
				}
				if _, err := q.Pa(); err == nil {
					t.Fatal("a percentage must not convert to pascal")
				}
				return
			}
			pa, err := q.Pa()
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(pa-c.wantPa) > 1e-9*math.Abs(c.wantPa) {
				t.Fatalf("%s = %v Pa, want %v", c.in, pa, c.wantPa)
			}
		})
	}
}

func TestRoundTrip(t *testing.T) {
	for _, s := range Symbols() {
		u, err := Lookup(s)
		if err != nil {
			t.Fatal(err)
		}
		for _, v := range []float64{0, 1, -3.25, 1234.5678} {
			if got := u.FromPa(u.ToPa(v)); math.Abs(got-v) > 1e-12*math.Max(1, math.Abs(v)) {
				t.Errorf("%s: %v -> %v", s, v, got)
			}
		}
	}
}

func FuzzParseQuantity(f *testing.F) {
	for _, s := range []string{"16 bar", "0.25 %", "-1e-3kPa", "", "x", "1e", "+.5 psi"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		q, err := ParseQuantity(s)
		if err != nil {
			return
		}
		if math.IsNaN(q.Value) || math.IsInf(q.Value, 0) {
			t.Fatalf("%q parsed to non-finite %v", s, q.Value)
		}
		if !q.Percent && q.Unit.Pa == 0 {
			t.Fatalf("%q parsed with no unit", s)
		}
	})
}
