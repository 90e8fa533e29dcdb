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
	}{{"percent_of_span", a.PercentOfSpan}, {"percent_of_reading", a.PercentOfReading}, {"floor_pa", a.FloorPa}} {
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
	return nil
}

// Reference is the reference standard's expanded uncertainty from its
// certificate: U_ref = PercentOfReading % · |p| + FloorPa, stated with coverage factor K.
type Reference struct {
	PercentOfReading float64 `json:"percent_of_reading"`
	FloorPa          float64 `json:"floor_pa"`
	K                float64 `json:"k"` // coverage factor of the certificate, usually 2
	// Head is the height difference between the reference's and the DUT's
	// pressure reference levels; the zero value means none.
	Head HeadCorrection `json:"head_correction"`
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
	return nil
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
// reference side). FluidDensity is taken as constant: right for liquids; for
// a gas give its density at the working pressure.
type HeadCorrection struct {
	FluidDensity     float64 `json:"fluid_density_kg_m3"`
	AirDensity       float64 `json:"air_density_kg_m3"`
	Gravity          float64 `json:"gravity_m_s2"` // local g; 0 means standard gravity 9.80665 m/s²
	ZRef             float64 `json:"z_ref_m"`
	ZDUT             float64 `json:"z_dut_m"`
	HeightHalfWidth  float64 `json:"height_half_width_m"`      // rectangular half-width of the height difference
	DensityHalfWidth float64 `json:"density_half_width_kg_m3"` // rectangular half-width of the fluid density
}

func (h HeadCorrection) enabled() bool { return h != HeadCorrection{} }

func (h HeadCorrection) gravity() float64 {
	if h.Gravity == 0 {
		return units.StandardGravity
	}
	return h.Gravity
}

// Pa is the correction added to the reference reading.
func (h HeadCorrection) Pa() float64 {
	return (h.FluidDensity - h.AirDensity) * h.gravity() * (h.ZRef - h.ZDUT)
}

// halfWidths are the rectangular half-widths, Pa, of the correction from
// the height and from the density uncertainty.
func (h HeadCorrection) halfWidths() (height, density float64) {
	g := h.gravity()
	return math.Abs(h.FluidDensity-h.AirDensity) * g * h.HeightHalfWidth, g * math.Abs(h.ZRef-h.ZDUT) * h.DensityHalfWidth
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
	if h.enabled() && h.FluidDensity == 0 {
		return errors.New("head correction: fluid density is 0; give the density of the pressure medium")
	}
	return nil
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
