package config

import (
	"math"
	"os"
	"strings"
	"testing"

	"plateau/analysis/balance"
)

// The example file loads, and its certificate values reach the equation in
// SI units as standard uncertainties (expanded ones divided by k = 2).
func TestBalanceExample(t *testing.T) {
	cfg, err := Load("../testdata/config/balance.yaml")
	if err != nil {
		t.Fatal(err)
	}
	b := cfg.ReferenceBalance()
	if b == nil {
		t.Fatal("no balance on the reference")
	}
	s := b.Setup()
	near := func(what string, got, want float64) {
		t.Helper()
		if math.Abs(got-want) > 1e-12*math.Abs(want) {
			t.Errorf("%s = %g, want %g", what, got, want)
		}
	}
	near("A0", s.Piston.AreaM2, 98.0665e-6)
	near("u(A0)", s.Piston.AreaU, 98.0665e-6*50e-6/2)
	near("λ", s.Piston.Lambda, 0.5e-12)
	near("u(λ)", s.Piston.LambdaU, 0.25e-12)
	near("α", s.Piston.Alpha, 22.5e-6)
	near("t_ref", s.Piston.RefTempC, 20)
	near("g", s.Gravity, 9.81075)
	near("u(M3)", s.Pieces[3].MassU, 0.00004)
	if s.Mode != balance.Gauge || len(s.Pieces) != 6 || s.Pieces[1].Kind != balance.ConventionalMass || !s.MassesCorrelated {
		t.Errorf("setup %+v", s)
	}
	c := cfg.BalanceConditions(b, cfg.Devices[0].HeightM)
	near("ρ_a", c.AirDensity, 1.19)
	near("z_device", c.DeviceHeight, 1.10)
	near("u(Δz)", c.HeightU, 0.01/math.Sqrt(3))
	near("ρ_f", c.Fluid.Density, 860)
	c.Loaded, c.PistonTempC = []string{"P1", "M1", "M2"}, 20
	r, err := s.Pressure(c)
	if err != nil {
		t.Fatal(err)
	}
	// About 4 bar: 4 kg on 98.0665 mm² at 9.81075 m/s², less the air
	// buoyancy (1 − 1.19/8000) and the 20 cm of oil up to the dial.
	want := 4.00005 * 9.81075 * (1 - 1.19/8000) / 98.0665e-6 / (1 + 0.5e-12*4e5)
	want -= (860 - 1.19) * 9.81075 * 0.20
	if math.Abs(r.DevicePa-want) > 0.02 {
		t.Errorf("P1+M1+M2 gives %.3f Pa at the dial, want about %.3f Pa", r.DevicePa, want)
	}
}

// Defaults: reference temperature 20 °C, air density 1.2 kg/m³, k = 2,
// conventional mass; an entered piston temperature reaches the conditions.
func TestBalanceDefaults(t *testing.T) {
	body := strings.NewReplacer(
		"      reference_temperature: 20\n", "",
		"      air_density: 1.19\n", "",
		"      piston_temperature_uncertainty: 0.2\n", "      piston_temperature: 21.5\n      coverage: 1\n      piston_temperature_uncertainty: 0.2\n",
	).Replace(readFile(t, "../testdata/config/balance.yaml"))
	cfg, err := Parse([]byte(body), "defaults.yaml")
	if err != nil {
		t.Fatal(err)
	}
	b := cfg.ReferenceBalance()
	c := cfg.BalanceConditions(b, 1.1)
	if *b.ReferenceTemperature != 20 || *b.AirDensity != 1.2 || c.AirDensity != 1.2 || c.PistonTempC != 21.5 || c.PistonTempU != 0.2 {
		t.Errorf("defaults: ref temp %v, air %v, conditions %+v", *b.ReferenceTemperature, *b.AirDensity, c)
	}
}

// Every problem of a balance section comes out in one pass, each with its
// line and key.
func TestBalanceProblemsInOnePass(t *testing.T) {
	body := strings.NewReplacer(
		"area_mm2: 98.0665", "area_mm2: -1",
		"gravity: 9.81075", "gravity: 981",
		"{id: M2, mass: 2.00004", "{id: M2, kind: true, mass: 2.00004",
		"{id: M3, mass: 4.00010, uncertainty: 0.00008}", "{id: M3, mass: 4.00010, uncertainty: 0.5}",
	).Replace(readFile(t, "../testdata/config/balance.yaml"))
	_, err := Parse([]byte(body), "many.yaml")
	ps, ok := AsProblems(err)
	if !ok {
		t.Fatalf("want problems, got %v", err)
	}
	for _, want := range []string{
		"many.yaml:17: instruments[0].balance.area_mm2 = \"-1\": must be an effective area in mm²",
		"many.yaml:25: instruments[0].balance.gravity = \"981\": local gravity",
		"many.yaml:34: instruments[0].balance.masses[2].density: is required for a true mass",
		"many.yaml:35: instruments[0].balance.masses[3].uncertainty = \"0.5\": must be the expanded uncertainty",
	} {
		if !strings.Contains(ps.Error(), want) {
			t.Errorf("missing %q in\n%v", want, ps)
		}
	}
}

func readFile(t *testing.T, path string) string {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

// A section built in code, not validated, still gives the defaults.
func TestBalanceNotValidated(t *testing.T) {
	b := &Balance{AreaMM2: 100, Gravity: 9.81, Masses: []MassPiece{{ID: "P1", Mass: 1}}}
	s, c := b.Setup(), b.LevelConditions()
	if s.Mode != balance.Gauge || s.Piston.RefTempC != 20 || s.Pieces[0].Kind != balance.ConventionalMass || c.AirDensity != 1.2 {
		t.Errorf("setup %+v, conditions %+v", s, c)
	}
	c.Loaded, c.PistonTempC = []string{"P1"}, 20
	if _, err := s.Pressure(c); err != nil {
		t.Error(err)
	}
}
