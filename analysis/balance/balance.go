// Package balance works out the pressure a pressure balance (dead-weight
// tester, piston gauge) generates for a loading of its mass set, and the
// uncertainty budget of that pressure. It is pure numerics: no I/O, no clock.
//
// The model is the pressure-balance equation in the form the calibration
// guides give it (EURAMET cg-3, Calibration of pressure balances, §3, and
// OIML R 110; the form below is written from memory of them):
//
//	gauge:    p = Σ m_i·g·(1 − ρ_a/ρ_i) / [A0·(1 + λ·p)·(1 + (α_p+α_c)·(t − t_ref))]
//	absolute: p = Σ m_i·g / [A0·(1 + λ·(p − μ))·(1 + (α_p+α_c)·(t − t_ref))] + μ
//
// with m_i the true masses of the pieces loaded (piston and carrier
// included), ρ_i their densities, ρ_a the air density, g local gravity, A0
// the effective area at zero pressure and t_ref, λ the pressure distortion
// coefficient, α_p+α_c the linear expansion coefficients of piston plus
// cylinder, t the piston temperature and μ the residual pressure under the
// bell jar. In absolute mode the weights are in vacuum: no air buoyancy.
//
// A piece calibrated in conventional mass m_c (OIML D 28: the mass of a
// reference of density 8000 kg/m³ that balances it in air of 1.2 kg/m³ at
// 20 °C) has the true mass m = m_c·(1 − ρ0/ρc)/(1 − ρ0/ρ), ρ0 = 1.2 kg/m³,
// ρc = 8000 kg/m³; its weight in air of density ρ_a is then
// m_c·g·(1 − ρ0/ρc)·(ρ − ρ_a)/(ρ − ρ0). Without a known density the piece
// is taken to be of the conventional density 8000 kg/m³, which gives the
// usual m_c·g·(1 − ρ_a/8000).
//
// The distortion term makes the equation a quadratic in p. It is solved in
// closed form, p = 2q / (1 + √(1 + 4λq)) with q the pressure without
// distortion: exact, no iteration tolerance to choose, and the form stays
// accurate when λ is zero or tiny (no cancellation), which the textbook
// root (−1 + √(1 + 4λq)) / 2λ does not.
//
// The head from the balance's reference level to a device at another
// height adds (ρ_f − ρ_a)·g·(z_ref − z_device) in gauge mode, ρ_f·g·(z_ref −
// z_device) in absolute mode (no air column on the evacuated side); a gas
// medium's density follows its absolute pressure, ρ_f = M·p_abs/(R·T).
//
// The budget follows the GUM (JCGM 100:2008): each input's standard
// uncertainty times its sensitivity coefficient, the partial derivative of
// the model worked out analytically, combined in quadrature. Mass pieces
// calibrated together against one standard may be declared correlated; their
// contributions then add linearly (correlation coefficient 1).
package balance

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Conventions of OIML D 28 for conventional mass.
const (
	ConventionalDensity    = 8000.0 // ρc, kg/m³, of the reference weight
	ConventionalAirDensity = 1.2    // ρ0, kg/m³
)

// molarGasConstant R in J/(mol·K), exact since the 2019 SI (k_B·N_A);
// from memory.
const molarGasConstant = 8.314462618

// Mode says what the balance generates.
type Mode string

const (
	Gauge    Mode = "gauge"    // above the surrounding atmosphere; the weights are in air
	Absolute Mode = "absolute" // above vacuum; the weights are under an evacuated bell jar
)

// MassKind says how a piece's mass is stated on its certificate.
type MassKind string

const (
	ConventionalMass MassKind = "conventional" // OIML D 28 conventional mass
	TrueMass         MassKind = "true"         // mass in vacuum
)

// Piston is the piston–cylinder unit as its certificate describes it.
type Piston struct {
	AreaM2     float64 // A0, effective area at zero pressure and at RefTempC, m²
	AreaU      float64 // standard uncertainty of A0, m²
	Lambda     float64 // λ, pressure distortion coefficient, 1/Pa
	LambdaU    float64 // standard uncertainty of λ, 1/Pa
	Alpha      float64 // α_p + α_c, linear expansion of piston plus cylinder, 1/K
	AlphaU     float64 // standard uncertainty of α_p + α_c, 1/K
	RefTempC   float64 // t_ref, the temperature A0 is stated at, °C
	RefHeightM float64 // height of the balance's reference level, m
}

// Piece is one weight of the mass set; the piston and its carrier are pieces too.
type Piece struct {
	ID       string
	Kind     MassKind
	MassKg   float64 // conventional or true mass, as Kind says
	MassU    float64 // standard uncertainty of the mass, kg
	Density  float64 // kg/m³; 0 for a conventional mass means the conventional 8000
	DensityU float64 // standard uncertainty of the density, kg/m³
}

// Setup is what stays the same through a run: the unit, the mass set and
// the place.
type Setup struct {
	Mode     Mode
	Piston   Piston
	Pieces   []Piece
	Gravity  float64 // local g, m/s²
	GravityU float64 // standard uncertainty of g, m/s²
	// MassesCorrelated: the pieces were calibrated against the same
	// standard, so their errors move together (contributions add linearly).
	MassesCorrelated bool
}

// Fluid is the pressure medium between the balance and the device.
type Fluid struct {
	Density  float64 // kg/m³ of a liquid (ignored when MolarMass is set)
	DensityU float64 // standard uncertainty of the density, kg/m³
	// A gas: its molar mass (kg/mol) and temperature (K); its density then
	// follows the absolute pressure. AtmosphericPa turns the gauge pressure
	// into an absolute one (gauge mode only; 0 means 101 325 Pa).
	MolarMass     float64
	TemperatureK  float64
	AtmosphericPa float64
}

// Conditions are what holds for one loading.
type Conditions struct {
	Loaded       []string // ids of the pieces on the piston
	PistonTempC  float64  // t, °C
	PistonTempU  float64  // standard uncertainty of t, K
	AirDensity   float64  // ρ_a, kg/m³ (gauge mode; the weights are in vacuum in absolute mode)
	AirDensityU  float64  // standard uncertainty of ρ_a, kg/m³
	ResidualPa   float64  // μ, residual pressure under the bell jar (absolute mode), Pa
	ResidualU    float64  // standard uncertainty of μ, Pa
	DeviceHeight float64  // height of the device's reference level, m
	HeightU      float64  // standard uncertainty of z_ref − z_device, m
	Fluid        Fluid
}

// Term is one line of the uncertainty budget.
type Term struct {
	Name        string  // what the input is, e.g. "effective area A0", "mass M1"
	Unit        string  // unit of Value and U
	Value       float64 // the input's estimate
	U           float64 // its standard uncertainty
	Sensitivity float64 // ∂p/∂input, Pa per unit
	Pa          float64 // contribution |c·u|, Pa
	mass        bool    // a mass term, combined linearly when the masses are correlated
}

// Result is the pressure of one loading and its budget.
type Result struct {
	LevelPa  float64 // at the balance's reference level
	DevicePa float64 // at the device's reference level (LevelPa plus the head)
	HeadPa   float64 // the head, DevicePa − LevelPa
	Budget   []Term
	U        float64 // combined standard uncertainty of DevicePa, Pa
	Loaded   []string
}

// Expanded is the expanded uncertainty at coverage factor k.
func (r Result) Expanded(k float64) float64 { return k * r.U }

// ParseLoading reads a loading written as the pieces' ids joined by "+",
// e.g. "P1+M1+M2"; spaces around the ids are allowed.
func ParseLoading(s string) ([]string, error) {
	if strings.TrimSpace(s) == "" {
		return nil, errors.New("no pieces: write the ids of the pieces loaded joined by +, e.g. P1+M1+M2")
	}
	parts := strings.Split(s, "+")
	ids := make([]string, 0, len(parts))
	for i, part := range parts {
		id := strings.TrimSpace(part)
		if id == "" {
			return nil, fmt.Errorf("%q: piece %d is empty (two + in a row, or one at an end)", s, i+1)
		}
		if strings.ContainsAny(id, " \t") {
			return nil, fmt.Errorf("%q: %q holds a space: join the pieces with +, e.g. P1+M1", s, id)
		}
		ids = append(ids, id)
	}
	return ids, nil
}

// Validate reports every problem of the setup at once.
func (s Setup) Validate() error {
	var errs []error
	bad := func(format string, args ...any) { errs = append(errs, fmt.Errorf(format, args...)) }
	if s.Mode != Gauge && s.Mode != Absolute {
		bad("mode %q: use %s or %s", s.Mode, Gauge, Absolute)
	}
	p := s.Piston
	if !(p.AreaM2 > 0) || math.IsInf(p.AreaM2, 0) {
		bad("effective area %g m²: must be above zero", p.AreaM2)
	}
	for _, c := range []struct {
		name string
		v    float64
	}{{"distortion coefficient", p.Lambda}, {"expansion coefficient", p.Alpha}, {"reference temperature", p.RefTempC}, {"reference height", p.RefHeightM}} {
		if !finite(c.v) {
			bad("%s %g: must be a finite number", c.name, c.v)
		}
	}
	for _, c := range []struct {
		name string
		v    float64
	}{{"effective area", p.AreaU}, {"distortion coefficient", p.LambdaU}, {"expansion coefficient", p.AlphaU}, {"gravity", s.GravityU}} {
		if !finite(c.v) || c.v < 0 {
			bad("uncertainty of the %s %g: must be finite and ≥ 0", c.name, c.v)
		}
	}
	if !(s.Gravity > 9.7 && s.Gravity < 9.9) {
		bad("gravity %g m/s²: local gravity on Earth is between 9.78 and 9.84 m/s²", s.Gravity)
	}
	if len(s.Pieces) == 0 {
		bad("the mass set has no pieces (the piston and its carrier are pieces too)")
	}
	seen := map[string]bool{}
	for _, pc := range s.Pieces {
		if pc.ID == "" || strings.ContainsAny(pc.ID, "+ \t") {
			bad("piece id %q: give a short id without spaces or +, e.g. M1", pc.ID)
		}
		if seen[pc.ID] {
			bad("piece %s is listed twice", pc.ID)
		}
		seen[pc.ID] = true
		if pc.Kind != ConventionalMass && pc.Kind != TrueMass {
			bad("piece %s: mass kind %q: use %s or %s", pc.ID, pc.Kind, ConventionalMass, TrueMass)
		}
		if !(pc.MassKg > 0) || math.IsInf(pc.MassKg, 0) {
			bad("piece %s: mass %g kg must be above zero", pc.ID, pc.MassKg)
		}
		if !finite(pc.MassU) || pc.MassU < 0 || !finite(pc.DensityU) || pc.DensityU < 0 {
			bad("piece %s: uncertainties must be finite and ≥ 0", pc.ID)
		}
		switch {
		case pc.Kind == TrueMass && !(pc.Density > 0):
			bad("piece %s: a true mass needs its density for the air buoyancy", pc.ID)
		case !finite(pc.Density) || pc.Density < 0:
			bad("piece %s: density %g kg/m³ must be above zero", pc.ID, pc.Density)
		case pc.Density > 0 && pc.Density <= 2*ConventionalAirDensity:
			bad("piece %s: density %g kg/m³ is not the density of a solid", pc.ID, pc.Density)
		}
	}
	return errors.Join(errs...)
}

// Pressure works out the pressure of one loading and its budget.
func (s Setup) Pressure(c Conditions) (Result, error) {
	if err := s.Validate(); err != nil {
		return Result{}, err
	}
	if err := c.check(s.Mode); err != nil {
		return Result{}, err
	}
	loaded, err := s.pieces(c.Loaded)
	if err != nil {
		return Result{}, err
	}
	m := s.model(c)
	r := Result{Loaded: c.Loaded}
	r.LevelPa, err = m.level(loaded)
	if err != nil {
		return Result{}, err
	}
	r.HeadPa = m.head(r.LevelPa)
	r.DevicePa = r.LevelPa + r.HeadPa
	r.Budget = m.budget(r.LevelPa, loaded)
	var sq, linear float64
	for _, t := range r.Budget {
		if t.mass && s.MassesCorrelated {
			linear += t.Pa
		} else {
			sq += t.Pa * t.Pa
		}
	}
	r.U = math.Sqrt(sq + linear*linear)
	return r, nil
}

func (c Conditions) check(mode Mode) error {
	for _, v := range []struct {
		name string
		v    float64
	}{
		{"piston temperature", c.PistonTempC}, {"device height", c.DeviceHeight},
		{"fluid density", c.Fluid.Density}, {"gas molar mass", c.Fluid.MolarMass},
		{"gas temperature", c.Fluid.TemperatureK}, {"atmospheric pressure", c.Fluid.AtmosphericPa},
	} {
		if !finite(v.v) {
			return fmt.Errorf("%s %g: must be a finite number", v.name, v.v)
		}
	}
	for _, v := range []struct {
		name string
		v    float64
	}{
		{"piston temperature", c.PistonTempU}, {"air density", c.AirDensityU}, {"residual pressure", c.ResidualU},
		{"height difference", c.HeightU}, {"fluid density", c.Fluid.DensityU},
	} {
		if !finite(v.v) || v.v < 0 {
			return fmt.Errorf("uncertainty of the %s %g: must be finite and ≥ 0", v.name, v.v)
		}
	}
	if c.PistonTempC < -40 || c.PistonTempC > 100 {
		return fmt.Errorf("piston temperature %g °C: outside -40 … 100 °C; is it in °C?", c.PistonTempC)
	}
	if mode == Gauge && (!(c.AirDensity >= 0) || c.AirDensity > 10) {
		return fmt.Errorf("air density %g kg/m³: must be from 0 to 10 (about 1.2 at a bench)", c.AirDensity)
	}
	if mode == Absolute && (!finite(c.ResidualPa) || c.ResidualPa < 0) {
		return fmt.Errorf("residual pressure %g Pa: must be finite and ≥ 0", c.ResidualPa)
	}
	if c.Fluid.Density < 0 || c.Fluid.MolarMass < 0 || c.Fluid.AtmosphericPa < 0 {
		return errors.New("fluid density, gas molar mass and atmospheric pressure cannot be negative")
	}
	if c.Fluid.MolarMass > 0 && !(c.Fluid.TemperatureK > 0) {
		return fmt.Errorf("gas temperature %g K: a gas medium needs its temperature in kelvin", c.Fluid.TemperatureK)
	}
	return nil
}

// pieces looks up the loaded ids; a piece can be on the piston only once.
func (s Setup) pieces(ids []string) ([]Piece, error) {
	if len(ids) == 0 {
		return nil, errors.New("no pieces loaded: the piston itself is a piece of the loading")
	}
	byID := make(map[string]Piece, len(s.Pieces))
	for _, p := range s.Pieces {
		byID[p.ID] = p
	}
	out := make([]Piece, 0, len(ids))
	on := map[string]bool{}
	for _, id := range ids {
		p, ok := byID[id]
		if !ok {
			return nil, fmt.Errorf("piece %q is not in the mass set (%s)", id, s.ids())
		}
		if on[id] {
			return nil, fmt.Errorf("piece %s is loaded twice", id)
		}
		on[id] = true
		out = append(out, p)
	}
	return out, nil
}

func (s Setup) ids() string {
	ids := make([]string, len(s.Pieces))
	for i, p := range s.Pieces {
		ids[i] = p.ID
	}
	return strings.Join(ids, ", ")
}

// model holds the inputs of one evaluation.
type model struct {
	mode   Mode
	pst    Piston
	s      Setup
	c      Conditions
	rhoAir float64 // ρ_a acting on the weights: 0 in absolute mode
}

func (s Setup) model(c Conditions) model {
	m := model{mode: s.Mode, pst: s.Piston, s: s, c: c}
	if s.Mode == Gauge {
		m.rhoAir = c.AirDensity
	}
	return m
}

// weight is the downward force of one piece in air of density ρ_a, N, and
// its derivatives with respect to the mass, the piece's density and ρ_a
// (per unit of g: the caller multiplies by g).
func weight(p Piece, rhoAir float64) (f, dm, drho, dair float64) {
	rho := p.Density
	if p.Kind == TrueMass {
		// m·(1 − ρ_a/ρ)
		b := 1 - rhoAir/rho
		return p.MassKg * b, b, p.MassKg * rhoAir / (rho * rho), -p.MassKg / rho
	}
	if rho == 0 {
		rho = ConventionalDensity
	}
	// m_c·(1 − ρ0/ρc)·(ρ − ρ_a)/(ρ − ρ0)
	const cc = 1 - ConventionalAirDensity/ConventionalDensity
	b := cc * (rho - rhoAir) / (rho - ConventionalAirDensity)
	d := rho - ConventionalAirDensity
	return p.MassKg * b, b, p.MassKg * cc * (rhoAir - ConventionalAirDensity) / (d * d), -p.MassKg * cc / d
}

// force is Σ m_i·g·b_i, N.
func (m model) force(loaded []Piece) float64 {
	var w float64
	for _, p := range loaded {
		f, _, _, _ := weight(p, m.rhoAir)
		w += f
	}
	return w * m.s.Gravity
}

// thermal is 1 + α·(t − t_ref).
func (m model) thermal() float64 { return 1 + m.pst.Alpha*(m.c.PistonTempC-m.pst.RefTempC) }

// level solves the equation at the reference level.
func (m model) level(loaded []Piece) (float64, error) {
	k := m.thermal()
	if !(k > 0) {
		return 0, fmt.Errorf("thermal factor 1 + α·(t − t_ref) = %g: check the expansion coefficient and the piston temperature", k)
	}
	q := m.force(loaded) / (m.pst.AreaM2 * k)
	disc := 1 + 4*m.pst.Lambda*q
	if !(disc > 0) {
		return 0, fmt.Errorf("the distortion coefficient %g /Pa is too negative for %g Pa: the equation has no solution; check its unit", m.pst.Lambda, q)
	}
	p := 2 * q / (1 + math.Sqrt(disc))
	if m.mode == Absolute {
		p += m.c.ResidualPa
	}
	return p, nil
}

// fluidDensity is the medium's density at the reference level's pressure,
// and its derivative with respect to that pressure.
func (m model) fluidDensity(level float64) (rho, drho float64) {
	f := m.c.Fluid
	if f.MolarMass == 0 {
		return f.Density, 0
	}
	abs := level
	if m.mode == Gauge {
		atm := f.AtmosphericPa
		if atm == 0 {
			atm = 101325 // the standard atmosphere, exact by definition
		}
		abs += atm
	}
	k := f.MolarMass / (molarGasConstant * f.TemperatureK)
	return k * abs, k
}

// headAir is the air density of the column beside the line: none in absolute mode.
func (m model) headAir() float64 {
	if m.mode == Absolute {
		return 0
	}
	return m.c.AirDensity
}

func (m model) dz() float64 { return m.pst.RefHeightM - m.c.DeviceHeight }

func (m model) head(level float64) float64 {
	rho, _ := m.fluidDensity(level)
	return (rho - m.headAir()) * m.s.Gravity * m.dz()
}

// budget lists every input with its sensitivity coefficient on the
// pressure at the device, worked out analytically:
//
//	p·(1 + λ·p) = q = W / (A0·K)  ⇒  ∂p/∂q = 1/(1 + 2λp), ∂p/∂λ = −p²/(1 + 2λp)
//
// and the head adds its own terms; a gas head also scales every
// level-pressure term by 1 + (∂ρ_f/∂p)·g·Δz.
func (m model) budget(level float64, loaded []Piece) []Term {
	pst, g := m.pst, m.s.Gravity
	k := m.thermal()
	pe := level // the pressure the distortion acts on
	if m.mode == Absolute {
		pe -= m.c.ResidualPa
	}
	d := 1 + 2*pst.Lambda*pe
	w := m.force(loaded)
	q := w / (pst.AreaM2 * k)
	dpdq := 1 / d
	_, drhoF := m.fluidDensity(level)
	dz := m.dz()
	gain := 1 + drhoF*g*dz // ∂p_device/∂p_level
	rhoF, _ := m.fluidDensity(level)

	var terms []Term
	add := func(name, unit string, value, u, c float64, mass bool) {
		terms = append(terms, Term{Name: name, Unit: unit, Value: value, U: u, Sensitivity: c, Pa: math.Abs(c * u), mass: mass})
	}
	perForce := gain * dpdq / (pst.AreaM2 * k) // ∂p_device/∂W
	var dair float64                           // ∂W/∂ρ_a
	for _, p := range loaded {
		_, dm, drho, da := weight(p, m.rhoAir)
		add("mass "+p.ID, "kg", p.MassKg, p.MassU, perForce*g*dm, true)
		if p.DensityU > 0 {
			rho := p.Density
			if rho == 0 {
				rho = ConventionalDensity
			}
			add("density "+p.ID, "kg/m³", rho, p.DensityU, perForce*g*drho, false)
		}
		dair += g * da
	}
	add("effective area A0", "m²", pst.AreaM2, pst.AreaU, -gain*dpdq*q/pst.AreaM2, false)
	add("distortion coefficient λ", "1/Pa", pst.Lambda, pst.LambdaU, -gain*pe*pe/d, false)
	dt := m.c.PistonTempC - pst.RefTempC
	add("expansion coefficient α", "1/K", pst.Alpha, pst.AlphaU, -gain*dpdq*q*dt/k, false)
	add("piston temperature", "°C", m.c.PistonTempC, m.c.PistonTempU, -gain*dpdq*q*pst.Alpha/k, false)
	add("gravity", "m/s²", g, m.s.GravityU, gain*dpdq*q/g+(rhoF-m.headAir())*dz, false)
	if m.mode == Gauge {
		add("air density", "kg/m³", m.c.AirDensity, m.c.AirDensityU, perForce*dair-g*dz, false)
	} else {
		// p = p_e + μ with p_e independent of μ: ∂p/∂μ = 1.
		add("residual pressure μ", "Pa", m.c.ResidualPa, m.c.ResidualU, gain, false)
	}
	add("height difference", "m", dz, m.c.HeightU, (rhoF-m.headAir())*g, false)
	add("fluid density", "kg/m³", rhoF, m.c.Fluid.DensityU, g*dz, false)
	return terms
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// Cover gives the smallest line U(p) = pct/100·|p| + floor, with the slope
// taken at the highest pressure, that is at or above the expanded
// uncertainty k·u of every result: the form a reference's uncertainty takes
// in a comparison (% of reading plus a floor). The budget's uncertainty
// grows more slowly than in proportion to the pressure (its fixed terms),
// so the line is tight at the top and at the worst point and conservative
// between them. Both parts are rounded up to two significant digits, as a
// certificate states an uncertainty.
func Cover(results []Result, k float64) (pct, floorPa float64) {
	pct, floorPa = cover(results, k)
	return ceil2(pct), ceil2(floorPa)
}

// ceil2 rounds x > 0 up to two significant digits.
func ceil2(x float64) float64 {
	if !(x > 0) || math.IsInf(x, 0) {
		return x
	}
	scale := math.Pow(10, math.Floor(math.Log10(x))-1)
	// Through its two-digit decimal text, so that 0.0087 is the float
	// nearest 0.0087 and prints as such.
	v, _ := strconv.ParseFloat(strconv.FormatFloat(math.Ceil(x/scale*(1-1e-12))*scale, 'g', 2, 64), 64)
	return v
}

func cover(results []Result, k float64) (pct, floorPa float64) {
	top := -1.0
	for _, r := range results {
		if p := math.Abs(r.DevicePa); p > top && p > 0 {
			top, pct = p, 100*r.Expanded(k)/p
		}
	}
	var most float64
	for _, r := range results {
		floorPa = math.Max(floorPa, r.Expanded(k)-pct/100*math.Abs(r.DevicePa))
		most = math.Max(most, r.Expanded(k))
	}
	// What the top's own rounding leaves (1e-14 Pa) is no floor: a
	// certificate would print it as one.
	if floorPa < 1e-9*most {
		floorPa = 0
	}
	return pct, floorPa
}
