package analysis

import (
	"errors"
	"fmt"
	"math"
	"strings"

	"plateau/analysis/limits"
	"plateau/analysis/units"
)

// Device describes the device under test: its calibrated range, its
// resolution and its accuracy specification.
type Device struct {
	LowerPa      float64  `json:"lower_pa"`      // lower range value
	UpperPa      float64  `json:"upper_pa"`      // upper range value
	ResolutionPa float64  `json:"resolution_pa"` // digit step, or the readable fraction of a scale division
	Accuracy     Accuracy `json:"accuracy"`
	Unit         string   `json:"unit"` // the DUT's own unit symbol, for display only
	// Temperature effect: TempCoefficient % of span per kelvin of distance
	// between the ambient temperature (Options.AmbientC) and
	// ReferenceTemperatureC; 0 means not specified.
	TempCoefficient       float64 `json:"temperature_coefficient_percent_span_per_k,omitempty"`
	ReferenceTemperatureC float64 `json:"reference_temperature_c,omitempty"`
	// Loop is a 4–20 mA transmitter's output, calibrated in mA (output.go); nil for other devices.
	Loop *Loop `json:"loop,omitempty"`
	// Mode is gauge or absolute ("" for a table that does not say);
	// Conditions the reference conditions (ambient.go).
	Mode       string      `json:"mode,omitempty"`
	Conditions *Conditions `json:"conditions,omitempty"`
}

// Span is the upper minus the lower range value; compound ranges use the full span.
func (d Device) Span() float64 { return d.UpperPa - d.LowerPa }

// Accuracy is the maximum permissible error (MPE) specification. Every
// component that is set contributes and the contributions are summed, so a
// transmitter specified as "0.05 % of span + 0.02 % of reading" is written
// with both percentages.
type Accuracy struct {
	EN837Class       float64 `json:"en837_class,omitempty"`        // EN 837-1 Table 11 class, e.g. 0.6 or 1.6
	ASMEGrade        string  `json:"asme_grade,omitempty"`         // ASME B40.100 grade, e.g. "2A" or "A"
	PercentOfSpan    float64 `json:"percent_of_span,omitempty"`    // custom limit, % of span
	PercentOfReading float64 `json:"percent_of_reading,omitempty"` // custom limit, % of the reference value
	FloorPa          float64 `json:"floor_pa,omitempty"`           // custom constant limit, Pa
	// HysteresisPercentOfSpan is a hysteresis limit from the device's own
	// specification, % of span. Without it an EN 837-1 class limits the
	// hysteresis of every cycle to the MPE; other specifications set none.
	HysteresisPercentOfSpan float64 `json:"hysteresis_percent_of_span,omitempty"`
}

// quarterTolerance keeps a reference value that sits on a quarter-span
// boundary in the middle half although unit conversion moved it by a few
// parts in 10¹⁶; no pressure reading is that exact.
const quarterTolerance = 1e-9

// ASMEGradeLimitPercent returns the ASME B40.100 permissible error, % of
// span, for a reading at fraction f of the span (0 = lower range value,
// 1 = upper). The middle half is the closed interval [0.25, 0.75]: at exactly
// 25 % and 75 % of span the tighter middle-half limit applies. The standard
// text we have does not say which side owns the boundary, so we take the
// stricter reading, which can only make a verdict more conservative.
func ASMEGradeLimitPercent(grade string, f float64) (float64, error) {
	g, err := limits.Grade(grade)
	if err != nil {
		return 0, err
	}
	if f >= 0.25-quarterTolerance && f <= 0.75+quarterTolerance {
		return g.Middle, nil
	}
	return g.Outer, nil
}

// ASMEGrades lists the known ASME B40.100 grades, tightest first.
func ASMEGrades() []string { return limits.ASMEGrades() }

// EN837Classes lists the EN 837-1 accuracy classes.
func EN837Classes() []float64 { return limits.EN837Classes() }

func (a Accuracy) set() bool {
	return a.EN837Class != 0 || a.ASMEGrade != "" || a.PercentOfSpan != 0 || a.PercentOfReading != 0 || a.FloorPa != 0
}

func (a Accuracy) validate() error {
	if !a.set() {
		return errors.New("no accuracy specification: give an EN 837-1 class, an ASME B40.100 grade or a custom limit")
	}
	if a.EN837Class != 0 && !limits.IsEN837Class(a.EN837Class) {
		return fmt.Errorf("EN 837-1 class %g is not in Table 11 (known: %s)", a.EN837Class, strings.Join(limits.EN837ClassNames(), ", "))
	}
	if a.ASMEGrade != "" {
		if _, err := ASMEGradeLimitPercent(a.ASMEGrade, 0.5); err != nil {
			return err
		}
	}
	for _, c := range []struct {
		name string
		v    float64
	}{{"percent_of_span", a.PercentOfSpan}, {"percent_of_reading", a.PercentOfReading}, {"floor_pa", a.FloorPa},
		{"hysteresis_percent_of_span", a.HysteresisPercentOfSpan}} {
		if !finite(c.v) || c.v < 0 {
			return fmt.Errorf("accuracy %s = %g: must be a finite number ≥ 0", c.name, c.v)
		}
	}
	return nil
}

// MPE returns the maximum permissible error, Pa, at reference value p.
// The device must have been validated (Analyze does it).
func (d Device) MPE(p float64) float64 {
	span := d.Span()
	a := d.Accuracy
	mpe := a.EN837Class/100*span + a.PercentOfSpan/100*span + a.PercentOfReading/100*math.Abs(p) + a.FloorPa
	if a.ASMEGrade != "" {
		pct, _ := ASMEGradeLimitPercent(a.ASMEGrade, (p-d.LowerPa)/span)
		mpe += pct / 100 * span
	}
	return mpe
}

// HysteresisLimit is the largest permitted hysteresis of one cycle at
// reference value p, and whether the specification sets one. EN 837-1
// limits hysteresis to the absolute value of the MPE at every point (from
// memory, REFERENCES.md §2.1 [M]); ASME grades and custom limits set none
// unless HysteresisPercentOfSpan is given.
func (d Device) HysteresisLimit(p float64) (float64, bool) {
	switch {
	case d.Accuracy.HysteresisPercentOfSpan > 0:
		return d.Accuracy.HysteresisPercentOfSpan / 100 * d.Span(), true
	case d.Accuracy.EN837Class != 0:
		return d.MPE(p), true
	}
	return 0, false
}

// Validate reports the first problem with the device description.
func (d Device) Validate() error {
	if !finite(d.LowerPa) || !finite(d.UpperPa) {
		return fmt.Errorf("device range %g … %g Pa: both ends must be finite numbers", d.LowerPa, d.UpperPa)
	}
	if d.Span() <= 0 || !finite(d.Span()) {
		return fmt.Errorf("device range %g … %g Pa: span must be positive (upper above lower)", d.LowerPa, d.UpperPa)
	}
	if !finite(d.ResolutionPa) || d.ResolutionPa <= 0 {
		return fmt.Errorf("device resolution %g Pa: must be a finite number > 0 (digit step or readable fraction of a division)", d.ResolutionPa)
	}
	if err := d.Accuracy.validate(); err != nil {
		return fmt.Errorf("device accuracy: %w", err)
	}
	if !finite(d.TempCoefficient) || d.TempCoefficient < 0 {
		return fmt.Errorf("device temperature coefficient %g %% of span per K: must be a finite number ≥ 0", d.TempCoefficient)
	}
	if !finite(d.ReferenceTemperatureC) || d.ReferenceTemperatureC < -273.15 {
		return fmt.Errorf("device reference temperature %g °C: must be a finite temperature", d.ReferenceTemperatureC)
	}
	return nil
}

// Reference is the reference standard's expanded uncertainty from its
// certificate: U_ref = PercentOfReading % · |p| + FloorPa, stated with coverage factor K.
type Reference struct {
	PercentOfReading float64 `json:"percent_of_reading"`
	FloorPa          float64 `json:"floor_pa"`
	K                float64 `json:"k"` // coverage factor of the certificate, usually 2
	// Stability since calibration: the half-width of a rectangular
	// distribution, % of reading plus a floor, from the certificate history
	// or the maker's long-term stability; both 0 means not evaluated.
	StabilityPercentOfReading float64 `json:"stability_percent_of_reading,omitempty"`
	StabilityFloorPa          float64 `json:"stability_floor_pa,omitempty"`
	// ResolutionPa is the reference's own digit step; 0 means not evaluated.
	ResolutionPa float64 `json:"resolution_pa,omitempty"`
	// Head is the height difference between the reference's and the DUT's
	// pressure reference levels; the zero value means none.
	Head HeadCorrection `json:"head_correction"`
	// Mode is the reference's own mode; Barometer, when set, converted its
	// readings to the device's mode (ambient.go).
	Mode      string     `json:"mode,omitempty"`
	Barometer *Barometer `json:"barometer,omitempty"`
}

// Expanded returns U_ref at reference value p, at the certificate's K.
func (r Reference) Expanded(p float64) float64 {
	return r.PercentOfReading/100*math.Abs(p) + r.FloorPa
}

// Validate reports the first problem with the reference description.
func (r Reference) Validate() error {
	if !finite(r.PercentOfReading) || r.PercentOfReading < 0 || !finite(r.FloorPa) || r.FloorPa < 0 {
		return fmt.Errorf("reference uncertainty %g %% of reading + %g Pa: both must be finite and ≥ 0", r.PercentOfReading, r.FloorPa)
	}
	if r.PercentOfReading == 0 && r.FloorPa == 0 {
		return errors.New("reference uncertainty is zero: give the certificate's expanded uncertainty (% of reading and/or floor)")
	}
	if !finite(r.K) || r.K <= 0 {
		return fmt.Errorf("reference coverage factor k = %g: must be > 0 (usually 2)", r.K)
	}
	for _, c := range []struct {
		name string
		v    float64
	}{{"stability % of reading", r.StabilityPercentOfReading}, {"stability floor", r.StabilityFloorPa}, {"resolution", r.ResolutionPa}} {
		if !finite(c.v) || c.v < 0 {
			return fmt.Errorf("reference %s = %g: must be a finite number ≥ 0", c.name, c.v)
		}
	}
	return r.Barometer.validate()
}

// stability is the half-width of the drift since calibration at p.
func (r Reference) stability(p float64) float64 {
	return r.StabilityPercentOfReading/100*math.Abs(p) + r.StabilityFloorPa
}

// HeadCorrection describes a height difference between the reference
// standard's and the DUT's pressure reference levels. The zero value means
// no correction. Heights are the levels of the two instruments, not a signed
// difference, so the sign cannot be got wrong:
//
//	p_at_DUT = p_ref + (ρ_f − ρ_a) · g · (z_ref − z_DUT)
//
// A DUT mounted lower than the reference sees a higher pressure. For an
// absolute-pressure DUT set AirDensity to 0 (no air column on an evacuated
// reference side). FluidDensity is constant, right for liquids; for a gas
// set Gas, and the density follows each reading's absolute pressure.
type HeadCorrection struct {
	FluidDensity     float64 `json:"fluid_density_kg_m3"`
	AirDensity       float64 `json:"air_density_kg_m3"`
	Gravity          float64 `json:"gravity_m_s2"` // local g; 0 means standard gravity 9.80665 m/s²
	ZRef             float64 `json:"z_ref_m"`
	ZDUT             float64 `json:"z_dut_m"`
	HeightHalfWidth  float64 `json:"height_half_width_m"`      // rectangular half-width of the height difference
	DensityHalfWidth float64 `json:"density_half_width_kg_m3"` // rectangular half-width of the fluid density (a gas: at 1 bar absolute)
	Gas              *Gas    `json:"gas,omitempty"`
}

// Gas describes a gaseous pressure medium, whose density grows with the
// absolute pressure: ρ = p_abs·M / (Z·R·T) (ideal gas with compressibility
// factor Z; REFERENCES.md §6, physics).
type Gas struct {
	MolarMass    float64 `json:"molar_mass_kg_mol"` // e.g. 0.0280134 for nitrogen
	TemperatureK float64 `json:"temperature_k"`     // temperature of the gas in the line
	Z            float64 `json:"compressibility"`   // 0 means 1 (ideal gas)
	// AtmosphericPa turns a gauge-pressure reading into an absolute one; 0
	// means the standard atmosphere. Absolute says readings already are.
	AtmosphericPa float64 `json:"atmospheric_pa,omitempty"`
	Absolute      bool    `json:"absolute,omitempty"`
}

// molarGasConstant R, J/(mol·K): exact since the 2019 SI redefinition
// (k_B·N_A), from memory.
const molarGasConstant = 8.314462618

// standardAtmospherePa is 1 atm, exact by definition (REFERENCES.md §5).
const standardAtmospherePa = 101325

// density is the gas density at a reading p (gauge or absolute as configured).
func (g Gas) density(p float64) float64 {
	abs := p
	if !g.Absolute {
		atm := g.AtmosphericPa
		if atm == 0 {
			atm = standardAtmospherePa
		}
		abs += atm
	}
	z := g.Z
	if z == 0 {
		z = 1
	}
	return math.Max(abs, 0) * g.MolarMass / (z * molarGasConstant * g.TemperatureK)
}

func (h HeadCorrection) enabled() bool { return h != HeadCorrection{} }

func (h HeadCorrection) gravity() float64 {
	if h.Gravity == 0 {
		return units.StandardGravity
	}
	return h.Gravity
}

// fluidDensity is the medium's density at reference reading p.
func (h HeadCorrection) fluidDensity(p float64) float64 {
	if h.Gas != nil {
		return h.Gas.density(p)
	}
	return h.FluidDensity
}

// Pa is the correction added to a liquid-medium reference reading, which
// does not depend on the pressure; for a gas use At.
func (h HeadCorrection) Pa() float64 { return h.At(0) }

// At is the correction added to the reference reading p.
func (h HeadCorrection) At(p float64) float64 {
	return (h.fluidDensity(p) - h.AirDensity) * h.gravity() * (h.ZRef - h.ZDUT)
}

// halfWidths are the rectangular half-widths, Pa, of the correction at
// reference reading p from the height and from the density uncertainty.
// A gas's density half-width is given at 1 bar absolute and scales with
// the absolute pressure, as the density does.
func (h HeadCorrection) halfWidths(p float64) (height, density float64) {
	g := h.gravity()
	dh := h.DensityHalfWidth
	if h.Gas != nil {
		dh *= h.Gas.density(p) / h.Gas.density(h.Gas.atBar())
	}
	return math.Abs(h.fluidDensity(p)-h.AirDensity) * g * h.HeightHalfWidth, g * math.Abs(h.ZRef-h.ZDUT) * dh
}

// atBar is the reading that is 1 bar absolute.
func (g Gas) atBar() float64 {
	if g.Absolute {
		return 1e5
	}
	atm := g.AtmosphericPa
	if atm == 0 {
		atm = standardAtmospherePa
	}
	return 1e5 - atm
}

// Validate reports the first problem with the head-correction description.
func (h HeadCorrection) Validate() error {
	for _, c := range []struct {
		name string
		v    float64
	}{{"fluid density", h.FluidDensity}, {"air density", h.AirDensity}, {"gravity", h.Gravity},
		{"height half-width", h.HeightHalfWidth}, {"density half-width", h.DensityHalfWidth}} {
		if !finite(c.v) || c.v < 0 {
			return fmt.Errorf("head correction %s = %g: must be a finite number ≥ 0", c.name, c.v)
		}
	}
	if !finite(h.ZRef) || !finite(h.ZDUT) {
		return fmt.Errorf("head correction heights z_ref = %g m, z_dut = %g m: must be finite", h.ZRef, h.ZDUT)
	}
	if g := h.Gas; g != nil {
		if !finite(g.MolarMass) || g.MolarMass <= 0 || g.MolarMass > 1 {
			return fmt.Errorf("head correction gas molar mass %g kg/mol: must be > 0 (nitrogen 0.0280134)", g.MolarMass)
		}
		if !finite(g.TemperatureK) || g.TemperatureK < 150 || g.TemperatureK > 500 {
			return fmt.Errorf("head correction gas temperature %g K: must be a temperature in kelvin, 150 … 500", g.TemperatureK)
		}
		if !finite(g.Z) || g.Z < 0 || g.Z > 3 || !finite(g.AtmosphericPa) || g.AtmosphericPa < 0 {
			return fmt.Errorf("head correction gas compressibility %g or atmospheric pressure %g Pa: must be finite and ≥ 0", g.Z, g.AtmosphericPa)
		}
		return nil
	}
	if h.enabled() && h.FluidDensity == 0 {
		return errors.New("head correction: fluid density is 0; give the density of the pressure medium")
	}
	return nil
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
