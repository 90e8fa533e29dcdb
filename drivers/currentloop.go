package drivers

import (
	"errors"
	"fmt"
	"math"

	"plateau/analysis"
	"plateau/analysis/units"
	"plateau/config"
)

// NAMUR NE 43 signal bands (REFERENCES.md §7, [C-sec]): 3.8 … 20.5 mA carries
// a measurement (including saturation just outside 4–20 mA); anything outside
// is a failure signal or undefined. For the reference (and so for the safety
// guard) such a current is never a pressure; the device under test's is
// kept and flagged (analysis.ClassifyCurrent), since an as-found
// transmitter reading 3.70 mA at zero is a finding, not a lost reading.
const (
	LoopValidLow  = analysis.BandLowMA  // mA
	LoopValidHigh = analysis.BandHighMA // mA
	loopZero      = analysis.LoopZeroMA // mA at the lower range value
	loopSpan      = analysis.LoopSpanMA // mA from lower to upper range value
)

// CurrentLoop scales a linear 4–20 mA transmitter output to pressure over
// [LowerPa, UpperPa].
type CurrentLoop struct {
	LowerPa, UpperPa float64
}

// NewCurrentLoop reads the range quantities ("0 bar", "10 bar") of a config block.
func NewCurrentLoop(c config.CurrentLoop) (CurrentLoop, error) {
	lo, err := quantityPa(c.Lower)
	if err != nil {
		return CurrentLoop{}, fmt.Errorf("current_loop.lower: %w", err)
	}
	hi, err := quantityPa(c.Upper)
	if err != nil {
		return CurrentLoop{}, fmt.Errorf("current_loop.upper: %w", err)
	}
	if hi == lo {
		return CurrentLoop{}, fmt.Errorf("current_loop: lower and upper range values are equal (%s)", c.Lower)
	}
	if !finite(lo) || !finite(hi) || !finite(hi-lo) {
		return CurrentLoop{}, fmt.Errorf("current_loop: range %s … %s is not finite", c.Lower, c.Upper)
	}
	return CurrentLoop{LowerPa: lo, UpperPa: hi}, nil
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func quantityPa(s string) (float64, error) {
	q, err := units.ParseQuantity(s)
	if err != nil {
		return 0, err
	}
	return q.Pa()
}

// ErrLoopFault says a loop current lies outside the NAMUR NE 43 measurement band.
var ErrLoopFault = fmt.Errorf("loop current outside %.1f–%.1f mA (NAMUR NE 43): failure signal, not a measurement", LoopValidLow, LoopValidHigh)

// OpenLoopBelow is the current under which a device's loop counts as open (a
// broken wire, no supply) rather than as an output to evaluate. A two-wire
// transmitter draws about 3.5 mA just to power itself and signals a failure
// at 3.6 mA or a little less, so nothing below 1 mA is its own output
// (common practice; the threshold is our choice).
const OpenLoopBelow = 1.0 // mA

// ErrOpenLoop says a device's loop current is too small to come from the
// transmitter: the loop is open or unpowered. The reading is a link fault,
// so that device misses its points (with this reason) while the run goes on.
var ErrOpenLoop = fmt.Errorf("loop current below %.1f mA: the loop is open or unpowered", OpenLoopBelow)

// Pa converts a loop current in mA to pascal:
// p = LRV + (I − 4 mA) / 16 mA × (URV − LRV) (REFERENCES.md §7).
// Currents outside 3.8–20.5 mA return ErrLoopFault.
func (c CurrentLoop) Pa(mA float64) (float64, error) {
	if !(mA >= LoopValidLow && mA <= LoopValidHigh) { // also catches NaN
		return 0, fmt.Errorf("%.3f mA: %w", mA, ErrLoopFault)
	}
	return c.scale(mA), nil
}

// scale is the linear scaling without the band check.
func (c CurrentLoop) scale(mA float64) float64 {
	return c.LowerPa + (mA-loopZero)/loopSpan*(c.UpperPa-c.LowerPa)
}

// MilliAmps is the ideal output current for a pressure:
// I = 4 mA + 16 mA × (p − LRV) / (URV − LRV).
func (c CurrentLoop) MilliAmps(pa float64) float64 {
	return loopZero + loopSpan*(pa-c.LowerPa)/(c.UpperPa-c.LowerPa)
}

// Conversion turns an instrument's raw value (after register scale and
// offset, in the instrument's configured unit) into pascal.
type Conversion struct {
	Unit units.Unit   // unit of the raw value when it is a pressure
	Loop *CurrentLoop // set when the raw value is a loop current in mA
	// KeepOutOfBand: a finite loop current outside the NE 43 band is a
	// reading, to be flagged downstream, rather than a fault. Set for the
	// device under test only.
	KeepOutOfBand bool
}

// NewConversion builds the conversion for an instrument: a pressure unit, or
// "mA" with the current loop enabled. A device under test keeps currents
// outside the NE 43 band; every other role refuses them.
func NewConversion(inst config.Instrument) (Conversion, error) {
	if inst.Loop.Enabled {
		if inst.Unit != "mA" {
			return Conversion{}, fmt.Errorf("instrument %q: unit %q with current_loop enabled: the raw value must be in mA", inst.Name, inst.Unit)
		}
		loop, err := NewCurrentLoop(inst.Loop)
		if err != nil {
			return Conversion{}, fmt.Errorf("instrument %q: %w", inst.Name, err)
		}
		return Conversion{Loop: &loop, KeepOutOfBand: inst.Role == config.RoleDevice}, nil
	}
	u, err := units.Lookup(inst.Unit)
	if err != nil {
		return Conversion{}, fmt.Errorf("instrument %q: unit: %w", inst.Name, err)
	}
	return Conversion{Unit: u}, nil
}

// RawUnit is the symbol of the raw value.
func (c Conversion) RawUnit() string {
	if c.Loop != nil {
		return "mA"
	}
	return c.Unit.Symbol
}

// ToPa converts a raw value to pascal. A loop current outside the NAMUR band
// gives an error that wraps ErrLoopFault, unless KeepOutOfBand; then only a
// current below OpenLoopBelow is refused (ErrOpenLoop).
func (c Conversion) ToPa(raw float64) (float64, error) {
	if c.Loop != nil && c.KeepOutOfBand {
		if raw < OpenLoopBelow {
			return 0, fmt.Errorf("%.3f mA: %w", raw, ErrOpenLoop)
		}
		return c.Loop.scale(raw), nil
	}
	if c.Loop != nil {
		return c.Loop.Pa(raw)
	}
	return c.Unit.ToPa(raw), nil
}

// FromPa converts pascal to the raw value (used to write setpoints).
func (c Conversion) FromPa(pa float64) float64 {
	if c.Loop != nil {
		return c.Loop.MilliAmps(pa)
	}
	return c.Unit.FromPa(pa)
}

// ErrNotFinite says a value is NaN or infinite: no measurement, whatever
// produced it (the wire, a scale or offset, a range conversion).
var ErrNotFinite = errors.New("not a finite number")

// Finish fills Pa from Raw and returns the reading, or a KindOutOfRange
// *ReadError when the raw value is no measurement. Drivers call it last. A
// refused reading keeps its raw value (with Pa left at zero) so that the
// fault is recorded as it came and the safety check can see a loop current
// above its range — except a raw value that is not finite, which is zeroed:
// a reading never carries NaN or ±Inf, since every comparison with NaN is
// false and an over-pressure check would never fire.
func (c Conversion) Finish(instrument string, r Reading) (Reading, error) {
	r.RawUnit = c.RawUnit()
	if !finite(r.Raw) {
		err := fmt.Errorf("raw value %g %s: %w", r.Raw, r.RawUnit, ErrNotFinite)
		r.Raw = 0
		return r, Fail(instrument, KindOutOfRange, err)
	}
	pa, err := c.ToPa(r.Raw)
	if err != nil {
		return r, Fail(instrument, KindOutOfRange, err)
	}
	if !finite(pa) {
		return r, Fail(instrument, KindOutOfRange, fmt.Errorf("%g %s is %g Pa: %w", r.Raw, r.RawUnit, pa, ErrNotFinite))
	}
	r.Pa = pa
	return r, nil
}
