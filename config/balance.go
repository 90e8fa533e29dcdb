package config

import (
	"fmt"
	"math"
	"path/filepath"
	"strings"

	"plateau/analysis/balance"
	"plateau/analysis/readout"
	"plateau/analysis/units"
)

// Balance is the balance: section of the reference instrument when the
// reference is a pressure balance (dead-weight tester): the piston–cylinder
// unit, the mass set and the place, as their certificates state them. The
// pressure of each loading is worked out with the pressure-balance equation
// (analysis/balance). Every uncertainty here is the certificate's expanded
// uncertainty at Coverage (default 2).
type Balance struct {
	Mode string `mapstructure:"mode"` // gauge (default) | absolute
	// The piston–cylinder unit: effective area at zero pressure and at
	// ReferenceTemperature (°C, default 20), its relative uncertainty, the
	// pressure distortion coefficient λ and the expansion coefficient of
	// piston plus cylinder, and the height of its reference level (m, the
	// same scale as head.device_height).
	AreaMM2               float64  `mapstructure:"area_mm2"`
	AreaUncertaintyPPM    float64  `mapstructure:"area_uncertainty_ppm"`
	DistortionPPMPerMPa   float64  `mapstructure:"distortion_ppm_per_mpa"`
	DistortionUncertainty float64  `mapstructure:"distortion_uncertainty_ppm_per_mpa"`
	ExpansionPPMPerK      float64  `mapstructure:"expansion_ppm_per_k"`
	ExpansionUncertainty  float64  `mapstructure:"expansion_uncertainty_ppm_per_k"`
	ReferenceTemperature  *float64 `mapstructure:"reference_temperature"`
	ReferenceHeight       float64  `mapstructure:"reference_height"`
	// The place: local gravity (m/s²) and the air density (kg/m³, default
	// 1.2; gauge mode).
	Gravity               float64  `mapstructure:"gravity"`
	GravityUncertainty    float64  `mapstructure:"gravity_uncertainty"`
	AirDensity            *float64 `mapstructure:"air_density"`
	AirDensityUncertainty float64  `mapstructure:"air_density_uncertainty"`
	// Absolute mode: the residual pressure under the bell jar, e.g. "1 Pa".
	Residual            string `mapstructure:"residual_pressure"`
	ResidualUncertainty string `mapstructure:"residual_uncertainty"`
	// The piston temperature: read by an ambient instrument (its name), or
	// entered once for the run (°C); with neither, each loading gives it.
	PistonThermometer            string   `mapstructure:"piston_thermometer"`
	PistonTemperature            *float64 `mapstructure:"piston_temperature"`
	PistonTemperatureUncertainty float64  `mapstructure:"piston_temperature_uncertainty"`
	// MassesCorrelated: the pieces were calibrated against the same
	// standard, so their uncertainties add linearly.
	MassesCorrelated bool        `mapstructure:"masses_correlated"`
	Coverage         float64     `mapstructure:"coverage"`
	Masses           []MassPiece `mapstructure:"masses"`
	// Loadings lists the loading of each point of procedure.points, in the
	// same order (P1+M1+M2, or vent for a point at zero): the prompt and
	// status tell the operator what to load, and the reference's
	// uncertainty in a run covers exactly these loadings.
	Loadings []string `mapstructure:"loadings"`

	// Planned is Loadings resolved, by index in procedure.points (nil for
	// vent); empty when none are listed or they have problems.
	Planned [][]string `mapstructure:"-"`

	ResidualPa  float64 `mapstructure:"-"`
	ResidualUPa float64 `mapstructure:"-"`
}

// MassPiece is one piece of the mass set; the piston and its carrier are
// pieces too.
type MassPiece struct {
	ID                 string  `mapstructure:"id"`
	Kind               string  `mapstructure:"kind"`        // conventional (default) | true
	Mass               float64 `mapstructure:"mass"`        // kg, conventional or true as Kind says
	Uncertainty        float64 `mapstructure:"uncertainty"` // kg
	Density            float64 `mapstructure:"density"`     // kg/m³; a conventional mass without it is taken as 8000
	DensityUncertainty float64 `mapstructure:"density_uncertainty"`
}

// Defaults of the balance section (common practice: 20 °C is the usual
// reference temperature of an effective area, 1.2 kg/m³ the conventional
// air density of OIML D 28, k = 2 the usual coverage factor).
const (
	defaultBalanceRefTemp  = 20.0
	defaultBalanceAir      = 1.2
	defaultBalanceCoverage = 2.0
)

var (
	balanceModes = []string{string(balance.Gauge), string(balance.Absolute)}
	massKinds    = []string{string(balance.ConventionalMass), string(balance.TrueMass)}
)

// LinkBalance is the link of a pressure balance reference: nothing is
// polled; its reading is the pressure worked out for the loading on it.
const LinkBalance = "balance"

// validateBalanceLink judges an instrument with link kind balance.
func (c *Config) validateBalanceLink(p *Problems, key string, in *Instrument) {
	if in.Role != RoleReference {
		p.bad(key+".link.kind", LinkBalance, "a pressure balance is a reference: give this instrument role: reference, or another link kind")
	}
	if in.Balance == nil {
		p.bad(key+".balance", "", "is required with link.kind: balance: the piston–cylinder unit, the mass set and local gravity")
	}
	if strings.TrimSpace(in.Link.Address) == "" {
		p.bad(key+".link.address", "", "is required with link.kind: balance: the loading file plateau load writes and the run reads, e.g. /var/lib/plateau/loading")
	} else if !filepath.IsAbs(in.Link.Address) && c.File != "" {
		// The daemon and plateau load may run in different directories:
		// both find the file next to the configuration.
		in.Link.Address = filepath.Join(filepath.Dir(c.File), in.Link.Address)
	}
}

// ReferenceBalance returns the reference instrument's balance section, or
// nil when the reference is not a pressure balance.
func (c *Config) ReferenceBalance() *Balance {
	for i := range c.Instruments {
		if in := &c.Instruments[i]; in.Role == RoleReference && in.Balance != nil {
			return in.Balance
		}
	}
	return nil
}

// validateBalances reads the two pressures of each balance section and
// judges every key, all problems in one pass.
func (c *Config) validateBalances(p *Problems) {
	for i := range c.Instruments {
		in := &c.Instruments[i]
		if in.Balance == nil {
			continue
		}
		key := fmt.Sprintf("instruments[%d].balance", i)
		if in.Link.Kind != LinkBalance {
			p.bad(key, "", "describes a pressure balance: give this instrument link.kind: balance (its reading is worked out from the loading)")
		}
		c.validateBalance(p, key, in.Balance)
	}
}

func (c *Config) validateBalance(p *Problems, key string, b *Balance) {
	k := func(f string) string { return key + "." + f }
	if b.Mode == "" {
		b.Mode = string(balance.Gauge)
	}
	oneOf(p, k("mode"), b.Mode, balanceModes)
	if b.Coverage == 0 {
		b.Coverage = defaultBalanceCoverage
	}
	number := func(f string, v, lo, hi float64, msg string) {
		if !(v >= lo && v <= hi) {
			p.bad(k(f), fmtNum(v), "%s", msg)
		}
	}
	number("coverage", b.Coverage, 1, 3, "is the coverage factor k of the uncertainties in this section, from 1 to 3 (usually 2)")
	if b.AreaMM2 == 0 {
		p.bad(k("area_mm2"), "", "is required: the effective area of the piston–cylinder unit at zero pressure, in mm² (e.g. 4.9033)")
	} else {
		number("area_mm2", b.AreaMM2, 0.01, 20000, "must be an effective area in mm², from 0.01 to 20000 (a 1 cm² piston is 100 mm²)")
	}
	if b.AreaUncertaintyPPM == 0 {
		p.bad(k("area_uncertainty_ppm"), "", "is required: the expanded uncertainty of the effective area from its certificate, in ppm (e.g. 20)")
	} else {
		number("area_uncertainty_ppm", b.AreaUncertaintyPPM, 0, 10000, "must be a relative uncertainty in ppm, from 0 to 10000 (1 %)")
	}
	number("distortion_ppm_per_mpa", b.DistortionPPMPerMPa, -100, 100, "must be the pressure distortion coefficient λ in ppm per MPa (e.g. 0.9), from -100 to 100")
	number("distortion_uncertainty_ppm_per_mpa", b.DistortionUncertainty, 0, 100, "must be an uncertainty in ppm per MPa, from 0 to 100")
	// Piston plus cylinder expand by some ppm per kelvin; a value below 1 is
	// one in 1/K written where ppm were meant.
	if a := b.ExpansionPPMPerK; !(a == 0 || (a >= 1 && a <= 50)) {
		p.bad(k("expansion_ppm_per_k"), fmtNum(a), "must be the linear expansion coefficient of piston plus cylinder in ppm per kelvin (tungsten carbide on tungsten carbide about 9, steel on steel about 23), from 1 to 50")
	}
	number("expansion_uncertainty_ppm_per_k", b.ExpansionUncertainty, 0, 50, "must be an uncertainty in ppm per kelvin, from 0 to 50")
	if b.ReferenceTemperature == nil {
		t := defaultBalanceRefTemp
		b.ReferenceTemperature = &t
	}
	number("reference_temperature", *b.ReferenceTemperature, 0, 40, "must be the temperature the effective area is stated at, in °C (usually 20)")
	number("reference_height", b.ReferenceHeight, -100, 100, "more than 100 m: heights are in metres")
	// The run's head correction starts at head.reference_height; with a
	// balance that is its reference level, so the two must agree.
	if h := c.Head.ReferenceHeight; h != b.ReferenceHeight {
		p.bad("head.reference_height", fmtNum(h), "the reference is a pressure balance: head.reference_height must be its reference level, %s = %s m", k("reference_height"), fmtNum(b.ReferenceHeight))
	}
	if b.Gravity == 0 {
		p.bad(k("gravity"), "", "is required: the local acceleration of gravity at the balance, m/s² (from a gravity survey; 9.80665 is only the standard value)")
	} else {
		number("gravity", b.Gravity, 9.7, 9.9, "local gravity on Earth is between 9.78 and 9.84 m/s²")
	}
	number("gravity_uncertainty", b.GravityUncertainty, 0, 0.01, "must be an uncertainty in m/s², from 0 to 0.01")
	b.validateAir(p, k)
	b.validateTemperature(c, p, k)
	before := p.Errors()
	if b.validateMasses(p, k) && p.Errors() == before {
		c.validatePlan(p, k("loadings"), b)
		c.compareCertificate(p, b)
	}
}

// compareCertificate warns when the reference: section states a smaller
// uncertainty than the balance's own budget gives with the piston alone
// and with every piece loaded (at the reference temperature): a run and
// plateau analyze take the reference's uncertainty from the balance's
// budget, so the section's line would mislead whoever reads it.
func (c *Config) compareCertificate(p *Problems, b *Balance) {
	s := b.Setup()
	if s.Validate() != nil {
		return
	}
	r := c.Reference
	unit, err := units.Lookup(c.Device.Unit)
	if err != nil {
		unit = units.Pascal
	}
	for _, load := range [][]MassPiece{b.Masses[:1], b.Masses} {
		cond := b.LevelConditions()
		cond.PistonTempC = s.Piston.RefTempC
		for _, m := range load {
			cond.Loaded = append(cond.Loaded, m.ID)
		}
		res, err := s.Pressure(cond)
		if err != nil {
			return
		}
		stated := r.UncertaintyPct/100*math.Abs(res.LevelPa) + r.FloorPa
		if u := res.Expanded(2); stated < u*(1-1e-9) {
			p.warn("reference.uncertainty", r.Uncertainty, "states %s at %s (%s loaded), but the pressure balance's own budget gives an expanded uncertainty of %s there (k = 2); runs and their certificates use the balance's budget, so correct the reference: section",
				readout.WithUnit(stated, unit, u/100), readout.WithUnit(res.LevelPa, unit, c.Device.ResolutionPa), strings.Join(cond.Loaded, "+"), readout.WithUnit(u, unit, u/100))
			return
		}
	}
}

func (b *Balance) validateAir(p *Problems, k func(string) string) {
	absolute := b.Mode == string(balance.Absolute)
	if b.AirDensity == nil {
		a := defaultBalanceAir
		b.AirDensity = &a
	} else if absolute {
		p.bad(k("air_density"), fmtNum(*b.AirDensity), "in absolute mode the weights are under vacuum: there is no air buoyancy; remove the key")
	}
	if !(*b.AirDensity >= 0.5 && *b.AirDensity <= 1.5) {
		p.bad(k("air_density"), fmtNum(*b.AirDensity), "must be the air density at the balance in kg/m³, from 0.5 to 1.5 (about 1.2 near sea level)")
	}
	if !(b.AirDensityUncertainty >= 0 && b.AirDensityUncertainty <= 0.2) {
		p.bad(k("air_density_uncertainty"), fmtNum(b.AirDensityUncertainty), "must be an uncertainty in kg/m³, from 0 to 0.2")
	}
	b.ResidualPa, b.ResidualUPa = 0, 0
	if !absolute {
		for _, f := range []struct{ key, val string }{{"residual_pressure", b.Residual}, {"residual_uncertainty", b.ResidualUncertainty}} {
			if f.val != "" {
				p.bad(k(f.key), f.val, "is for absolute mode (a bell jar over the weights); this balance is in gauge mode")
			}
		}
		return
	}
	if strings.TrimSpace(b.Residual) == "" {
		p.bad(k("residual_pressure"), "", "is required in absolute mode: the residual pressure under the bell jar as its vacuum gauge reads it, e.g. \"0.5 Pa\"")
		return
	}
	var ok bool
	if b.ResidualPa, ok = pressure(p, k("residual_pressure"), b.Residual, true); ok && !(b.ResidualPa >= 0 && b.ResidualPa <= 1000) {
		p.bad(k("residual_pressure"), b.Residual, "must be from 0 to 1 kPa: the residual pressure under an evacuated bell jar")
	}
	if b.ResidualUPa, ok = pressure(p, k("residual_uncertainty"), b.ResidualUncertainty, false); ok && !(b.ResidualUPa >= 0 && b.ResidualUPa <= 1000) {
		p.bad(k("residual_uncertainty"), b.ResidualUncertainty, "must be from 0 to 1 kPa")
	}
}

func (b *Balance) validateTemperature(c *Config, p *Problems, k func(string) string) {
	if b.PistonThermometer != "" && b.PistonTemperature != nil {
		p.bad(k("piston_temperature"), fmtNum(*b.PistonTemperature), "give either piston_thermometer (an ambient instrument reads it) or piston_temperature (entered for the run), not both")
	}
	if name := b.PistonThermometer; name != "" {
		found := false
		for _, in := range c.Instruments {
			if in.Name == name {
				found = true
				if in.Role != RoleAmbient {
					p.bad(k("piston_thermometer"), name, "names an instrument with role: %s; the piston thermometer is an instrument with role: ambient", in.Role)
				} else if in.Quantity != "" && in.Quantity != "temperature" {
					p.bad(k("piston_thermometer"), name, "names an ambient instrument that reads %s, not temperature", in.Quantity)
				}
			}
		}
		if !found {
			p.bad(k("piston_thermometer"), name, "names no instrument: give the name of the ambient instrument that reads the piston temperature")
		}
	}
	if t := b.PistonTemperature; t != nil && !(*t >= -10 && *t <= 50) {
		p.bad(k("piston_temperature"), fmtNum(*t), "must be the piston temperature in °C, from -10 to 50")
	}
	if u := b.PistonTemperatureUncertainty; !(u >= 0 && u <= 5) {
		p.bad(k("piston_temperature_uncertainty"), fmtNum(u), "must be an uncertainty in kelvin, from 0 to 5")
	}
}

// validateMasses judges the mass set; it says whether there is one.
func (b *Balance) validateMasses(p *Problems, k func(string) string) bool {
	if len(b.Masses) == 0 {
		p.bad(k("masses"), "", "is required: every piece of the mass set with its id and mass (the piston and its carrier are pieces too)")
		return false
	}
	seen := map[string]int{}
	for i := range b.Masses {
		m := &b.Masses[i]
		mk := func(f string) string { return fmt.Sprintf("%s[%d].%s", k("masses"), i, f) }
		switch id := m.ID; {
		case strings.TrimSpace(id) == "":
			p.bad(mk("id"), "", "every piece needs an id, as marked on it (e.g. P1, M1)")
		case strings.ContainsAny(id, "+ \t,;"):
			p.bad(mk("id"), id, "an id has no spaces, + or separators: a loading is written P1+M1+M2")
		default:
			if j, dup := seen[strings.ToLower(id)]; dup {
				p.bad(mk("id"), id, "is also the id of masses[%d]", j)
			}
			seen[strings.ToLower(id)] = i
		}
		if m.Kind == "" {
			m.Kind = string(balance.ConventionalMass)
		}
		oneOf(p, mk("kind"), m.Kind, massKinds)
		if m.Mass == 0 {
			p.bad(mk("mass"), "", "is required: the mass in kg from the certificate")
		} else if !(m.Mass > 0 && m.Mass <= 1000) {
			p.bad(mk("mass"), fmtNum(m.Mass), "must be a mass in kg, above 0 and at most 1000")
		}
		if !(m.Uncertainty >= 0) || (m.Mass > 0 && m.Uncertainty >= m.Mass/100) {
			p.bad(mk("uncertainty"), fmtNum(m.Uncertainty), "must be the expanded uncertainty of the mass in kg, at least 0 and below 1 %% of the mass")
		}
		switch {
		case m.Density == 0 && m.Kind == string(balance.TrueMass):
			p.bad(mk("density"), "", "is required for a true mass: the air buoyancy depends on it (stainless steel about 7950 kg/m³)")
		case m.Density != 0 && !(m.Density >= 500 && m.Density <= 25000):
			p.bad(mk("density"), fmtNum(m.Density), "must be the density of the piece in kg/m³, from 500 to 25000")
		}
		if !(m.DensityUncertainty >= 0 && m.DensityUncertainty <= 5000) {
			p.bad(mk("density_uncertainty"), fmtNum(m.DensityUncertainty), "must be an uncertainty in kg/m³, from 0 to 5000")
		}
	}
	return true
}

// Setup is the balance as analysis/balance takes it: SI units, standard
// uncertainties (each expanded one divided by Coverage).
func (b *Balance) Setup() balance.Setup {
	k := b.coverage()
	area := b.AreaMM2 * 1e-6
	s := balance.Setup{
		Mode: balance.Gauge,
		Piston: balance.Piston{
			AreaM2: area, AreaU: area * b.AreaUncertaintyPPM * 1e-6 / k,
			Lambda: b.DistortionPPMPerMPa * 1e-12, LambdaU: b.DistortionUncertainty * 1e-12 / k,
			Alpha: b.ExpansionPPMPerK * 1e-6, AlphaU: b.ExpansionUncertainty * 1e-6 / k,
			RefTempC: orDefault(b.ReferenceTemperature, defaultBalanceRefTemp), RefHeightM: b.ReferenceHeight,
		},
		Gravity: b.Gravity, GravityU: b.GravityUncertainty / k,
		MassesCorrelated: b.MassesCorrelated,
	}
	if b.Mode == string(balance.Absolute) {
		s.Mode = balance.Absolute
	}
	for _, m := range b.Masses {
		kind := balance.ConventionalMass
		if m.Kind == string(balance.TrueMass) {
			kind = balance.TrueMass
		}
		s.Pieces = append(s.Pieces, balance.Piece{ID: m.ID, Kind: kind, MassKg: m.Mass, MassU: m.Uncertainty / k,
			Density: m.Density, DensityU: m.DensityUncertainty / k})
	}
	return s
}

// LevelConditions are the conditions of a loading that the balance
// section gives, at the balance's own reference level (no head): air
// density, residual pressure and the piston temperature when entered for
// the run. The caller adds the pieces loaded, and the piston temperature
// when it is read or given per loading.
func (b *Balance) LevelConditions() balance.Conditions {
	k := b.coverage()
	cond := balance.Conditions{
		PistonTempU:  b.PistonTemperatureUncertainty / k,
		ResidualPa:   b.ResidualPa,
		ResidualU:    b.ResidualUPa / k,
		DeviceHeight: b.ReferenceHeight,
	}
	if b.Mode != string(balance.Absolute) {
		cond.AirDensity, cond.AirDensityU = orDefault(b.AirDensity, defaultBalanceAir), b.AirDensityUncertainty/k
	}
	if b.PistonTemperature != nil {
		cond.PistonTempC = *b.PistonTemperature
	}
	return cond
}

// BalanceConditions are LevelConditions for a device at deviceHeight,
// with the head from the head: section (its half-widths taken as
// rectangular).
func (c *Config) BalanceConditions(b *Balance, deviceHeight float64) balance.Conditions {
	h := c.Head
	cond := b.LevelConditions()
	cond.DeviceHeight = deviceHeight
	cond.HeightU = h.HeightUncertainty / math.Sqrt(3)
	cond.Fluid = balance.Fluid{Density: h.FluidDensity, DensityU: h.DensityUncertainty / math.Sqrt(3)}
	if h.GasMolarMass > 0 {
		cond.Fluid.MolarMass, cond.Fluid.TemperatureK = h.GasMolarMass, h.GasTemperature+273.15
	}
	return cond
}

// coverage and orDefault give the defaults to a section that was not
// validated (one built in code): validation fills them in the file's.
func (b *Balance) coverage() float64 {
	if b.Coverage == 0 {
		return defaultBalanceCoverage
	}
	return b.Coverage
}

func orDefault(v *float64, def float64) float64 {
	if v == nil {
		return def
	}
	return *v
}
