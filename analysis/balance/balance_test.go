package balance

import (
	"math"
	"strings"
	"testing"

	"gonum.org/v1/gonum/diff/fd"

	"plateau/analysis"
)

// A published worked example: J. M. Smith, H. C. Van Ness, M. M. Abbott,
// M. T. Swihart, Introduction to Chemical Engineering Thermodynamics, 8th
// ed., Example 1.2 (§1.5, Pressure): a dead-weight gauge with a piston of
// 1 cm diameter balanced by 6.14 kg (piston and pan included) at
// g = 9.82 m/s². Printed: F = 60.295 N, gauge pressure 7.677 × 10⁵ N/m² =
// 767.7 kPa; with a barometer reading 0.997 bar, absolute pressure
// 8.674 × 10⁵ N/m² = 867.4 kPa. The example neglects air buoyancy, thermal
// expansion and distortion: air density 0, α = 0, λ = 0 here.
func TestTextbookDeadWeightGauge(t *testing.T) {
	area := math.Pi / 4 * 0.01 * 0.01
	s := Setup{
		Mode:    Gauge,
		Piston:  Piston{AreaM2: area, RefTempC: 20},
		Pieces:  []Piece{{ID: "load", Kind: TrueMass, MassKg: 6.14, Density: 7900}},
		Gravity: 9.82,
	}
	c := Conditions{Loaded: []string{"load"}, PistonTempC: 20}
	r, err := s.Pressure(c)
	if err != nil {
		t.Fatal(err)
	}
	if f := r.LevelPa * area; math.Round(f*1000)/1000 != 60.295 {
		t.Errorf("force %.4f N, the example prints 60.295 N", f)
	}
	if kPa := math.Round(r.LevelPa/100) / 10; kPa != 767.7 {
		t.Errorf("gauge pressure %.4f kPa, the example prints 767.7 kPa", r.LevelPa/1000)
	}
	// The example adds the barometer to the gauge pressure. In absolute
	// mode the weights are in vacuum and the pressure on the piston's top
	// face (μ) adds in the same way, so μ = 0.997 bar gives its sum.
	s.Mode = Absolute
	c.ResidualPa = 0.997e5
	r, err = s.Pressure(c)
	if err != nil {
		t.Fatal(err)
	}
	if kPa := math.Round(r.LevelPa/100) / 10; kPa != 867.4 {
		t.Errorf("absolute pressure %.4f kPa, the example prints 867.4 kPa", r.LevelPa/1000)
	}
}

// An oil-operated balance of our own (invented values in the range such
// units have: 4.9 mm² tungsten-carbide piston, λ = 1 ppm/MPa, α = 9.1 ppm/K
// for piston plus cylinder, from memory of typical certificates).
func oilBalance() (Setup, Conditions) {
	s := Setup{
		Mode: Gauge,
		Piston: Piston{
			AreaM2: 4.903e-6, AreaU: 4.903e-6 * 15e-6,
			Lambda: 1e-12, LambdaU: 0.2e-12,
			Alpha: 9.1e-6, AlphaU: 0.5e-6,
			RefTempC: 20, RefHeightM: 0.85,
		},
		Pieces: []Piece{
			{ID: "P1", Kind: ConventionalMass, MassKg: 0.2, MassU: 1e-6, Density: 7920},
			{ID: "M1", Kind: ConventionalMass, MassKg: 5, MassU: 10e-6, Density: 7920, DensityU: 50},
			{ID: "M2", Kind: ConventionalMass, MassKg: 5, MassU: 10e-6},
			{ID: "M3", Kind: TrueMass, MassKg: 2.5, MassU: 5e-6, Density: 2700, DensityU: 20},
		},
		Gravity: 9.81232, GravityU: 2e-5,
	}
	c := Conditions{
		Loaded:      []string{"P1", "M1", "M2", "M3"},
		PistonTempC: 23.4, PistonTempU: 0.1,
		AirDensity: 1.17, AirDensityU: 0.01,
		DeviceHeight: 0.65, HeightU: 0.005,
		Fluid: Fluid{Density: 860, DensityU: 10},
	}
	return s, c
}

// The distortion term solved in closed form agrees with the fixed-point
// iteration p ← q / (1 + λp) and with the textbook quadratic root, and it
// stays exact where λ is zero.
func TestDistortionSolution(t *testing.T) {
	s, c := oilBalance()
	for _, lambda := range []float64{0, 1e-15, 1e-12, 5e-12, -2e-12} {
		s.Piston.Lambda = lambda
		r, err := s.Pressure(c)
		if err != nil {
			t.Fatal(err)
		}
		m := s.model(c)
		loaded, _ := s.pieces(c.Loaded)
		q := m.force(loaded) / (s.Piston.AreaM2 * m.thermal())
		p := q
		for range 100 {
			p = q / (1 + lambda*p)
		}
		if rel := math.Abs(r.LevelPa-p) / p; rel > 1e-14 {
			t.Errorf("λ = %g: closed form %.6f Pa, iteration %.6f Pa", lambda, r.LevelPa, p)
		}
		if lambda != 0 {
			root := (-1 + math.Sqrt(1+4*lambda*q)) / (2 * lambda)
			if rel := math.Abs(r.LevelPa-root) / root; rel > 1e-9 {
				t.Errorf("λ = %g: closed form %.6f Pa, quadratic root %.6f Pa", lambda, r.LevelPa, root)
			}
		} else if r.LevelPa != q {
			t.Errorf("λ = 0: %v Pa, want q = %v Pa", r.LevelPa, q)
		}
	}
}

// OIML D 28: a conventional mass is the mass of a reference of density
// 8000 kg/m³ that balances it in air of 1.2 kg/m³. A piece of that density
// in that air therefore weighs m_c·g·(1 − 1.2/8000), and a piece of any
// density weighs the same in that air (the convention's purpose).
func TestConventionalMass(t *testing.T) {
	base := Setup{Mode: Gauge, Piston: Piston{AreaM2: 1e-4, RefTempC: 20}, Gravity: 9.80665}
	at := func(p Piece, air float64) float64 {
		s := base
		s.Pieces = []Piece{p}
		r, err := s.Pressure(Conditions{Loaded: []string{p.ID}, PistonTempC: 20, AirDensity: air})
		if err != nil {
			t.Fatal(err)
		}
		return r.LevelPa * 1e-4
	}
	want := 10 * 9.80665 * (1 - 1.2/8000)
	for _, rho := range []float64{0, 8000, 7920, 2700, 16000} {
		if got := at(Piece{ID: "m", Kind: ConventionalMass, MassKg: 10, Density: rho}, 1.2); math.Abs(got-want) > 1e-12*want {
			t.Errorf("density %g in air of 1.2: %.12f N, want %.12f N", rho, got, want)
		}
	}
	// The same piece stated as a true mass (m = m_c·(1 − ρ0/ρc)/(1 − ρ0/ρ))
	// weighs the same in any air.
	for _, air := range []float64{0, 1.05, 1.2, 1.3} {
		rho := 2700.0
		mTrue := 10 * (1 - 1.2/8000) / (1 - 1.2/rho)
		conv := at(Piece{ID: "m", Kind: ConventionalMass, MassKg: 10, Density: rho}, air)
		tru := at(Piece{ID: "m", Kind: TrueMass, MassKg: mTrue, Density: rho}, air)
		if math.Abs(conv-tru) > 1e-12*tru {
			t.Errorf("air %g: conventional %.12f N, true %.12f N", air, conv, tru)
		}
	}
}

// Thermal expansion enlarges the area: 1 K above t_ref with α = 9.1 ppm/K
// lowers the pressure by the factor 1/(1 + 9.1e-6).
func TestThermalExpansion(t *testing.T) {
	s, c := oilBalance()
	s.Piston.Lambda = 0
	c.PistonTempC = s.Piston.RefTempC
	r0, err := s.Pressure(c)
	if err != nil {
		t.Fatal(err)
	}
	c.PistonTempC++
	r1, err := s.Pressure(c)
	if err != nil {
		t.Fatal(err)
	}
	if got, want := r1.LevelPa/r0.LevelPa, 1/(1+9.1e-6); math.Abs(got-want) > 1e-15 {
		t.Errorf("ratio %.15f, want %.15f", got, want)
	}
}

// The head agrees with the project's head correction (analysis package),
// for a liquid in gauge mode and for nitrogen in absolute mode.
func TestHead(t *testing.T) {
	s, c := oilBalance()
	r, err := s.Pressure(c)
	if err != nil {
		t.Fatal(err)
	}
	h := analysis.HeadCorrection{FluidDensity: 860, AirDensity: 1.17, Gravity: s.Gravity, ZRef: 0.85, ZDUT: 0.65}
	if want := h.Pa(); math.Abs(r.HeadPa-want) > 1e-9 {
		t.Errorf("head %.9f Pa, want %.9f Pa", r.HeadPa, want)
	}
	if r.DevicePa != r.LevelPa+r.HeadPa {
		t.Errorf("device pressure %v is not level %v plus head %v", r.DevicePa, r.LevelPa, r.HeadPa)
	}
	s.Mode = Absolute
	c.ResidualPa = 2
	c.Fluid = Fluid{MolarMass: 0.0280134, TemperatureK: 296.15}
	r, err = s.Pressure(c)
	if err != nil {
		t.Fatal(err)
	}
	h = analysis.HeadCorrection{Gravity: s.Gravity, ZRef: 0.85, ZDUT: 0.65,
		Gas: &analysis.Gas{MolarMass: 0.0280134, TemperatureK: 296.15, Absolute: true}}
	if want := h.At(r.LevelPa); math.Abs(r.HeadPa-want) > 1e-9*math.Abs(want) {
		t.Errorf("nitrogen head %.9f Pa, want %.9f Pa", r.HeadPa, want)
	}
}

// Every sensitivity coefficient of the budget matches the numerical
// derivative of the whole model (gonum's central differences), in gauge and
// in absolute mode, with a liquid and with a gas.
func TestSensitivitiesMatchNumericalDerivatives(t *testing.T) {
	type input struct {
		name string
		set  func(*Setup, *Conditions, float64) // add a step
	}
	piece := func(i int, mass bool) func(*Setup, *Conditions, float64) {
		return func(s *Setup, _ *Conditions, h float64) {
			ps := append([]Piece(nil), s.Pieces...)
			if mass {
				ps[i].MassKg += h
			} else {
				if ps[i].Density == 0 {
					ps[i].Density = ConventionalDensity
				}
				ps[i].Density += h
			}
			s.Pieces = ps
		}
	}
	inputs := []input{
		{"mass P1", piece(0, true)}, {"mass M1", piece(1, true)}, {"mass M3", piece(3, true)},
		{"density M1", piece(1, false)}, {"density M3", piece(3, false)},
		{"effective area A0", func(s *Setup, _ *Conditions, h float64) { s.Piston.AreaM2 += h }},
		{"distortion coefficient λ", func(s *Setup, _ *Conditions, h float64) { s.Piston.Lambda += h }},
		{"expansion coefficient α", func(s *Setup, _ *Conditions, h float64) { s.Piston.Alpha += h }},
		{"piston temperature", func(_ *Setup, c *Conditions, h float64) { c.PistonTempC += h }},
		{"gravity", func(s *Setup, _ *Conditions, h float64) { s.Gravity += h }},
		{"air density", func(_ *Setup, c *Conditions, h float64) { c.AirDensity += h }},
		{"residual pressure μ", func(_ *Setup, c *Conditions, h float64) { c.ResidualPa += h }},
		{"height difference", func(s *Setup, _ *Conditions, h float64) { s.Piston.RefHeightM += h }},
		{"fluid density", func(_ *Setup, c *Conditions, h float64) { c.Fluid.Density += h }},
	}
	scale := map[string]float64{ // a step size natural to each input
		"effective area A0": 1e-9, "distortion coefficient λ": 1e-13, "expansion coefficient α": 1e-7,
		"density M1": 100, "density M3": 100, "residual pressure μ": 500,
	}
	gas := func(s *Setup, c *Conditions) {
		c.Fluid = Fluid{MolarMass: 0.0280134, TemperatureK: 296.15, DensityU: 0.01}
	}
	cases := []struct {
		name string
		edit func(*Setup, *Conditions)
	}{
		{"gauge, oil", func(*Setup, *Conditions) {}},
		{"gauge, nitrogen", gas},
		{"absolute, nitrogen", func(s *Setup, c *Conditions) { gas(s, c); s.Mode = Absolute; c.ResidualPa = 30; c.ResidualU = 0.5 }},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			s0, c0 := oilBalance()
			tc.edit(&s0, &c0)
			r, err := s0.Pressure(c0)
			if err != nil {
				t.Fatal(err)
			}
			terms := map[string]Term{}
			for _, term := range r.Budget {
				terms[term.Name] = term
			}
			for _, in := range inputs {
				term, ok := terms[in.name]
				if !ok || (in.name == "fluid density" && c0.Fluid.MolarMass > 0) {
					// Not in this mode's budget (air density in absolute mode, density of a
					// piece without its uncertainty), or a gas's density, which is worked out.
					continue
				}
				step := scale[in.name]
				if step == 0 {
					step = 1e-3
				}
				f := func(x float64) float64 {
					s, c := s0, c0
					in.set(&s, &c, x*step)
					r, err := s.Pressure(c)
					if err != nil {
						t.Fatalf("%s: %v", in.name, err)
					}
					return r.DevicePa
				}
				num := fd.Derivative(f, 0, &fd.Settings{Formula: fd.Central, Step: 1e-2}) / step
				if math.Abs(num-term.Sensitivity) > 1e-5*math.Abs(num)+1e-9 {
					t.Errorf("%s: sensitivity %.9g, numerical %.9g", in.name, term.Sensitivity, num)
				}
			}
		})
	}
}

// The combined uncertainty is the root sum of squares of the terms; with
// correlated masses the mass terms add linearly first.
func TestCombinedUncertainty(t *testing.T) {
	s, c := oilBalance()
	r, err := s.Pressure(c)
	if err != nil {
		t.Fatal(err)
	}
	var sq, mass, massSq float64
	for _, term := range r.Budget {
		if strings.HasPrefix(term.Name, "mass ") {
			mass += term.Pa
			massSq += term.Pa * term.Pa
		} else {
			sq += term.Pa * term.Pa
		}
	}
	if want := math.Sqrt(sq + massSq); math.Abs(r.U-want) > 1e-12*want {
		t.Errorf("uncorrelated: u = %v Pa, want %v", r.U, want)
	}
	s.MassesCorrelated = true
	rc, err := s.Pressure(c)
	if err != nil {
		t.Fatal(err)
	}
	if want := math.Sqrt(sq + mass*mass); math.Abs(rc.U-want) > 1e-12*want {
		t.Errorf("correlated: u = %v Pa, want %v", rc.U, want)
	}
	if rc.U <= r.U {
		t.Errorf("correlated masses should give the larger uncertainty: %v ≤ %v", rc.U, r.U)
	}
	if rc.Expanded(2) != 2*rc.U {
		t.Errorf("expanded %v", rc.Expanded(2))
	}
	// The area term dominates a balance like this one: its relative
	// contribution is the area's relative uncertainty, 15 ppm.
	for _, term := range r.Budget {
		if term.Name == "effective area A0" {
			if rel := term.Pa / r.LevelPa; math.Abs(rel-15e-6) > 0.1e-6 {
				t.Errorf("area contribution %.3g of the pressure, want about 15e-6", rel)
			}
		}
	}
}

func TestParseLoading(t *testing.T) {
	for _, tc := range []struct {
		in   string
		want string
		err  string
	}{
		{"P1+M1+M2", "P1|M1|M2", ""},
		{" P1 + M10 ", "P1|M10", ""},
		{"P1", "P1", ""},
		{"", "", "no pieces"},
		{"P1++M1", "", "piece 2 is empty"},
		{"P1+", "", "piece 2 is empty"},
		{"P1 M1", "", `"P1 M1" holds a space: join the pieces with +`},
	} {
		got, err := ParseLoading(tc.in)
		if tc.err != "" {
			if err == nil || !strings.Contains(err.Error(), tc.err) {
				t.Errorf("%q: error %v, want %q", tc.in, err, tc.err)
			}
			continue
		}
		if err != nil || strings.Join(got, "|") != tc.want {
			t.Errorf("%q: %v %v, want %s", tc.in, got, err, tc.want)
		}
	}
}

func TestBadInputsAreRefused(t *testing.T) {
	s, c := oilBalance()
	for _, tc := range []struct {
		name string
		edit func(*Setup, *Conditions)
		want string
	}{
		{"unknown piece", func(_ *Setup, c *Conditions) { c.Loaded = []string{"P1", "M9"} }, `piece "M9" is not in the mass set (P1, M1, M2, M3)`},
		{"piece twice", func(_ *Setup, c *Conditions) { c.Loaded = []string{"P1", "M1", "M1"} }, "piece M1 is loaded twice"},
		{"nothing loaded", func(_ *Setup, c *Conditions) { c.Loaded = nil }, "no pieces loaded"},
		{"true mass without density", func(s *Setup, _ *Conditions) {
			s.Pieces = append([]Piece(nil), s.Pieces...)
			s.Pieces[3].Density = 0
		}, "piece M3: a true mass needs its density"},
		{"zero area and bad gravity together", func(s *Setup, _ *Conditions) { s.Piston.AreaM2 = 0; s.Gravity = 981 }, "effective area 0 m²: must be above zero\ngravity 981"},
		{"temperature in kelvin", func(_ *Setup, c *Conditions) { c.PistonTempC = 296 }, "is it in °C?"},
		{"NaN air", func(_ *Setup, c *Conditions) { c.AirDensity = math.NaN() }, "air density NaN"},
		{"negative λ beyond reach", func(s *Setup, _ *Conditions) { s.Piston.Lambda = -1e-6 }, "no solution"},
		{"duplicate id", func(s *Setup, _ *Conditions) { s.Pieces = append(append([]Piece(nil), s.Pieces...), s.Pieces[0]) }, "piece P1 is listed twice"},
	} {
		s2, c2 := s, c
		tc.edit(&s2, &c2)
		_, err := s2.Pressure(c2)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want %q", tc.name, err, tc.want)
		}
	}
}

// The cover line is at or above every point's expanded uncertainty and
// touches it at the top.
func TestCover(t *testing.T) {
	s, c := oilBalance()
	var rs []Result
	for _, load := range [][]string{{"P1"}, {"P1", "M3"}, {"P1", "M1"}, {"P1", "M1", "M2"}, {"P1", "M1", "M2", "M3"}} {
		c.Loaded = load
		r, err := s.Pressure(c)
		if err != nil {
			t.Fatal(err)
		}
		rs = append(rs, r)
	}
	pct, floor := Cover(rs, 2)
	if !(pct > 0 && floor >= 0) {
		t.Fatalf("cover %g %% + %g Pa", pct, floor)
	}
	for _, r := range rs {
		if line := pct/100*r.DevicePa + floor; line < r.Expanded(2)*(1-1e-12) {
			t.Errorf("at %.0f Pa the line gives %g Pa, below U = %g Pa", r.DevicePa, line, r.Expanded(2))
		}
	}
	top := rs[len(rs)-1]
	exact, _ := cover(rs, 2)
	if line := exact / 100 * top.DevicePa; math.Abs(line-top.Expanded(2)) > 1e-9*line {
		t.Errorf("at the top the line's slope part %g differs from U = %g", line, top.Expanded(2))
	}
	if !(pct >= exact && pct < exact*1.1) {
		t.Errorf("rounded slope %g %%, exact %g %%", pct, exact)
	}
	// One loading alone: the slope covers it, and what rounding leaves of
	// the floor is no floor.
	if _, floor := Cover(rs[len(rs)-1:], 2); floor != 0 {
		t.Errorf("one loading: floor %g Pa, want 0", floor)
	}
	for _, tc := range []struct{ in, want float64 }{{0.008649554, 0.0087}, {0.0087, 0.0087}, {75.0564, 76}, {0.1, 0.1}, {0, 0}} {
		if got := ceil2(tc.in); math.Abs(got-tc.want) > 1e-12*tc.want {
			t.Errorf("ceil2(%g) = %g, want %g", tc.in, got, tc.want)
		}
	}
}
