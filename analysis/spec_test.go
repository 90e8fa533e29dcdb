package analysis

import (
	"math"
	"testing"

	"plateau/analysis/units"
)

// Source: BS EN 837-1:1998 (= EN 837-1:1996) Table 11: the MPE is the class
// number in % of span (REFERENCES.md §2.1, [C]).
func TestEN837ClassLimits(t *testing.T) {
	bar := units.Bar.Pa
	for _, c := range []struct {
		class, lower, upper, wantPa float64
	}{
		{0.1, 0, 10 * bar, 0.01 * bar},
		{0.25, 0, 16 * bar, 0.04 * bar},
		{0.6, 0, 25 * bar, 0.15 * bar},
		{1, 0, 100 * bar, 1 * bar},
		{1.6, 0, 250 * bar, 4 * bar},
		{2.5, 0, 40 * bar, 1 * bar},
		{4, 0, 6 * bar, 0.24 * bar},
		{1, -1 * bar, 5 * bar, 0.06 * bar}, // compound range uses the full span: REFERENCES.md §2.1 [X]
	} {
		d := Device{LowerPa: c.lower, UpperPa: c.upper, ResolutionPa: 1, Accuracy: Accuracy{EN837Class: c.class}}
		if err := d.Validate(); err != nil {
			t.Fatalf("class %g: %v", c.class, err)
		}
		for _, p := range []float64{c.lower, (c.lower + c.upper) / 2, c.upper} {
			if got := d.MPE(p); math.Abs(got-c.wantPa) > 1e-9*c.wantPa {
				t.Errorf("class %g span %g Pa at %g Pa: MPE %g Pa, want %g", c.class, c.upper-c.lower, p, got, c.wantPa)
			}
		}
	}
	for _, bad := range []float64{0.5, 3, -1, math.NaN()} {
		d := Device{LowerPa: 0, UpperPa: 1e5, ResolutionPa: 1, Accuracy: Accuracy{EN837Class: bad}}
		if err := d.Validate(); err == nil {
			t.Errorf("class %g accepted", bad)
		}
	}
}

// Sources: grades 4A, A and D from secondary pages quoting ASME B40.100
// ([C-sec]); 3A, 2A, 1A, B and C are values from memory, not yet confirmed
// against the primary document ([M]); REFERENCES.md §2.2. The boundary rule
// (tighter limit at exactly 25 % and 75 %) is the owner's decision.
func TestASMEGradeLimits(t *testing.T) {
	for _, c := range []struct {
		grade string
		f     float64
		want  float64
	}{
		{"4A", 0, 0.1}, {"4A", 0.5, 0.1}, {"4A", 1, 0.1},
		{"3A", 0.1, 0.25}, {"3A", 0.5, 0.25}, // [M]
		{"2A", 0.9, 0.5}, // [M]
		{"1A", 0.3, 1},   // [M]
		{"A", 0, 2}, {"A", 0.2499, 2}, {"A", 0.25, 1}, {"A", 0.5, 1}, {"A", 0.75, 1}, {"A", 0.7501, 2}, {"A", 1, 2},
		{"B", 0.1, 3}, {"B", 0.25, 2}, {"B", 0.75, 2}, {"B", 0.76, 3}, // [M]
		{"C", 0.24, 4}, {"C", 0.5, 3}, // [M]
		{"D", 0.5, 5}, {"d", 0.1, 5},
	} {
		got, err := ASMEGradeLimitPercent(c.grade, c.f)
		if err != nil || got != c.want {
			t.Errorf("grade %s at %g of span: %g %% (%v), want %g %%", c.grade, c.f, got, err, c.want)
		}
	}
	if _, err := ASMEGradeLimitPercent("5A", 0.5); err == nil {
		t.Error("grade 5A accepted")
	}
	// A 100 psi grade A gauge: ±2 psi in the outer quarters, ±1 psi in the
	// middle half ([C-sec] example); 25 psi and 75 psi sit on the boundary,
	// where psi conversion must not push them into the wider limit.
	psi := units.PSI.Pa
	d := Device{LowerPa: 0, UpperPa: 100 * psi, ResolutionPa: psi / 2, Accuracy: Accuracy{ASMEGrade: "A"}}
	for _, c := range []struct{ p, want float64 }{{10, 2}, {24.9, 2}, {25, 1}, {50, 1}, {75, 1}, {75.1, 2}, {100, 2}} {
		if got := d.MPE(c.p * psi); math.Abs(got-c.want*psi) > 1e-9 {
			t.Errorf("grade A 100 psi at %g psi: MPE %g psi, want %g", c.p, got/psi, c.want)
		}
	}
}

func TestCustomAccuracySummed(t *testing.T) {
	d := Device{LowerPa: 0, UpperPa: 1e6, ResolutionPa: 1, Accuracy: Accuracy{
		PercentOfSpan: 0.05, PercentOfReading: 0.02, FloorPa: 10, EN837Class: 0.1,
	}}
	// 0.05 % × 1e6 + 0.02 % × 4e5 + 10 + 0.1 % × 1e6 = 500 + 80 + 10 + 1000
	if got := d.MPE(4e5); math.Abs(got-1590) > 1e-9 {
		t.Errorf("summed MPE %g, want 1590", got)
	}
}

func TestDeviceReferenceValidation(t *testing.T) {
	good := Device{LowerPa: 0, UpperPa: 1e6, ResolutionPa: 10, Accuracy: Accuracy{EN837Class: 1}}
	for name, d := range map[string]Device{
		"zero span":          {LowerPa: 1e5, UpperPa: 1e5, ResolutionPa: 1, Accuracy: good.Accuracy},
		"negative span":      {LowerPa: 1e5, UpperPa: 0, ResolutionPa: 1, Accuracy: good.Accuracy},
		"NaN upper":          {UpperPa: math.NaN(), ResolutionPa: 1, Accuracy: good.Accuracy},
		"zero resolution":    {UpperPa: 1e6, Accuracy: good.Accuracy},
		"no accuracy":        {UpperPa: 1e6, ResolutionPa: 1},
		"negative floor":     {UpperPa: 1e6, ResolutionPa: 1, Accuracy: Accuracy{FloorPa: -1}},
		"unknown ASME grade": {UpperPa: 1e6, ResolutionPa: 1, Accuracy: Accuracy{ASMEGrade: "Z"}},
	} {
		if err := d.Validate(); err == nil {
			t.Errorf("device %s accepted", name)
		}
	}
	if err := good.Validate(); err != nil {
		t.Fatal(err)
	}
	for name, r := range map[string]Reference{
		"zero uncertainty": {K: 2},
		"zero k":           {FloorPa: 1},
		"negative percent": {PercentOfReading: -0.1, K: 2},
		"NaN floor":        {FloorPa: math.NaN(), K: 2},
	} {
		if err := r.Validate(); err == nil {
			t.Errorf("reference %s accepted", name)
		}
	}
	for name, h := range map[string]HeadCorrection{
		"no fluid density": {ZRef: 1},
		"negative gravity": {FluidDensity: 1000, Gravity: -9.8},
		"NaN height":       {FluidDensity: 1000, ZDUT: math.NaN()},
	} {
		if err := h.Validate(); err == nil {
			t.Errorf("head correction %s accepted", name)
		}
	}
}

// Source: REFERENCES.md §6, magnitudes for a 0.1 m height difference with
// air 1.204 kg/m³ and g = 9.80665 m/s² ([X], our arithmetic on the [C-sec]
// formula); sign: a DUT mounted lower sees a higher pressure.
func TestHeadCorrection(t *testing.T) {
	for _, c := range []struct {
		name  string
		rho   float64
		want  float64
		tolPa float64
	}{
		{"water", 998.2, 977.7, 0.05},
		{"oil 860", 860, 842.2, 0.05},
		{"sebacate 912", 912, 893.2, 0.05},
	} {
		h := HeadCorrection{FluidDensity: c.rho, AirDensity: 1.204, ZRef: 0.1, ZDUT: 0}
		if got := h.Pa(); math.Abs(got-c.want) > c.tolPa {
			t.Errorf("%s, DUT 0.1 m lower: %g Pa, want %g", c.name, got, c.want)
		}
		h.ZRef, h.ZDUT = 0, 0.1
		if got := h.Pa(); math.Abs(got+c.want) > c.tolPa {
			t.Errorf("%s, DUT 0.1 m higher: %g Pa, want −%g", c.name, got, c.want)
		}
	}
	h := HeadCorrection{FluidDensity: 1000, Gravity: 9.81, ZRef: 0.5, ZDUT: 0.2, HeightHalfWidth: 0.005, DensityHalfWidth: 10}
	hh, hd := h.halfWidths(0)
	if math.Abs(hh-1000*9.81*0.005) > 1e-9 || math.Abs(hd-9.81*0.3*10) > 1e-9 {
		t.Errorf("half-widths %g, %g", hh, hd)
	}
}
