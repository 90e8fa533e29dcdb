package drivers

import (
	"errors"
	"math"
	"testing"

	"plateau/analysis/units"
	"plateau/config"
)

// REFERENCES.md §7: range 0–10 bar, 4/8/12/16/20 mA ↔ 0/2.5/5/7.5/10 bar,
// and the inverse checks 3.8 mA → −0.125 bar, 20.5 mA → 10.3125 bar (NAMUR
// NE 43 band limits, [C-sec]).
func TestCurrentLoopScaling(t *testing.T) {
	loop, err := NewCurrentLoop(config.CurrentLoop{Enabled: true, Lower: "0 bar", Upper: "10 bar"})
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct{ mA, bar float64 }{
		{4, 0}, {8, 2.5}, {12, 5}, {16, 7.5}, {20, 10}, {3.8, -0.125}, {20.5, 10.3125},
	}
	for _, c := range cases {
		pa, err := loop.Pa(c.mA)
		if err != nil || math.Abs(pa-c.bar*1e5) > 1e-6 {
			t.Errorf("%g mA → %g Pa, %v; want %g bar", c.mA, pa, err, c.bar)
		}
		if got := loop.MilliAmps(c.bar * 1e5); math.Abs(got-c.mA) > 1e-12 {
			t.Errorf("%g bar → %g mA, want %g", c.bar, got, c.mA)
		}
	}
}

// Outside 3.8–20.5 mA the signal is a failure (≤ 3.6, ≥ 21) or undefined:
// never a pressure.
func TestCurrentLoopNamurFaults(t *testing.T) {
	loop := CurrentLoop{LowerPa: 0, UpperPa: 1e6}
	for _, mA := range []float64{0, 3.6, 3.79, 20.51, 21, 22, math.NaN(), math.Inf(1)} {
		if _, err := loop.Pa(mA); !errors.Is(err, ErrLoopFault) {
			t.Errorf("%g mA accepted: %v", mA, err)
		}
	}
	c := Conversion{Loop: &loop}
	if _, err := c.Finish("tx", Reading{Raw: 3.6}); !errors.Is(err, ErrOutOfRange) {
		t.Errorf("Finish on a fault current: %v, want out of range", err)
	}
}

// The device under test's current outside the NE 43 band is a reading,
// scaled as inside it (REFERENCES.md §7: p = LRV + (I − 4)/16 × span; on
// 0–10 bar, 3.70 mA is −0.1875 bar and 21.0 mA is 10.625 bar); the
// reference's stays a fault, whatever its value.
func TestCurrentLoopDeviceKeepsOutOfBand(t *testing.T) {
	loopCfg := config.CurrentLoop{Enabled: true, Lower: "0 bar", Upper: "10 bar"}
	dev, err := NewConversion(config.Instrument{Name: "tx", Role: config.RoleDevice, Unit: "mA", Loop: loopCfg})
	if err != nil {
		t.Fatal(err)
	}
	ref, err := NewConversion(config.Instrument{Name: "ref", Role: config.RoleReference, Unit: "mA", Loop: loopCfg})
	if err != nil {
		t.Fatal(err)
	}
	if !dev.KeepOutOfBand || ref.KeepOutOfBand {
		t.Fatalf("keep: device %v, reference %v", dev.KeepOutOfBand, ref.KeepOutOfBand)
	}
	cases := []struct{ mA, bar float64 }{
		{3.70, -0.1875}, {3.6, -0.25}, {1.0, -1.875}, {20.6, 10.375}, {21.0, 10.625}, {12, 5},
	}
	// An open loop is no output to evaluate (common practice: a two-wire
	// transmitter cannot draw less than it needs to power itself).
	for _, mA := range []float64{0, 0.999, -0.2} {
		if _, err := dev.Finish("tx", Reading{Raw: mA}); !errors.Is(err, ErrOpenLoop) {
			t.Errorf("device at %g mA: %v, want an open loop", mA, err)
		}
	}
	for _, c := range cases {
		r, err := dev.Finish("tx", Reading{Raw: c.mA})
		if err != nil || math.Abs(r.Pa-c.bar*1e5) > 1e-6 || r.Raw != c.mA || r.RawUnit != "mA" {
			t.Errorf("device at %g mA: %+v %v, want %g bar", c.mA, r, err, c.bar)
		}
		_, err = ref.Finish("ref", Reading{Raw: c.mA})
		inBand := c.mA >= LoopValidLow && c.mA <= LoopValidHigh
		if inBand != (err == nil) || (!inBand && !errors.Is(err, ErrLoopFault)) {
			t.Errorf("reference at %g mA: %v", c.mA, err)
		}
	}
}

func TestNewConversion(t *testing.T) {
	cases := []struct {
		name string
		in   config.Instrument
		ok   bool
		unit string
	}{
		{"pressure", config.Instrument{Name: "a", Unit: "kPa"}, true, "kPa"},
		{"loop", config.Instrument{Name: "b", Unit: "mA", Loop: config.CurrentLoop{Enabled: true, Lower: "-1 bar", Upper: "9 bar"}}, true, "mA"},
		{"loop unit unset", config.Instrument{Name: "c", Loop: config.CurrentLoop{Enabled: true, Lower: "0 psi", Upper: "100 psi"}}, false, ""}, // no default unit
		{"loop range overflows", config.Instrument{Name: "h", Unit: "mA", Loop: config.CurrentLoop{Enabled: true, Lower: "-1e308 Pa", Upper: "1e308 Pa"}}, false, ""},
		{"loop with bar unit", config.Instrument{Name: "d", Unit: "bar", Loop: config.CurrentLoop{Enabled: true, Lower: "0 bar", Upper: "1 bar"}}, false, ""},
		{"loop empty range", config.Instrument{Name: "e", Unit: "mA", Loop: config.CurrentLoop{Enabled: true, Lower: "1 bar", Upper: "1 bar"}}, false, ""},
		{"loop bad quantity", config.Instrument{Name: "f", Unit: "mA", Loop: config.CurrentLoop{Enabled: true, Lower: "0", Upper: "1 bar"}}, false, ""},
		{"unknown unit", config.Instrument{Name: "g", Unit: "furlong"}, false, ""},
	}
	for _, c := range cases {
		conv, err := NewConversion(c.in)
		if (err == nil) != c.ok {
			t.Errorf("%s: err = %v", c.name, err)
			continue
		}
		if c.ok && conv.RawUnit() != c.unit {
			t.Errorf("%s: raw unit %q", c.name, conv.RawUnit())
		}
	}
	// A −1…9 bar compound loop at 4 mA reads −1 bar.
	conv, _ := NewConversion(cases[1].in)
	r, err := conv.Finish("b", Reading{Raw: 4})
	if err != nil || r.Pa != -1e5 || r.RawUnit != "mA" {
		t.Errorf("compound loop: %+v %v", r, err)
	}
}

// Every way a value can stop being a number ends in a failed read of kind
// out_of_range, with Pa zero and no NaN or Inf left in the reading.
func TestFinishRefusesNonFinite(t *testing.T) {
	bar := Conversion{Unit: mustUnit(t, "bar")}
	huge := CurrentLoop{LowerPa: 0, UpperPa: math.MaxFloat64} // 20.5 mA is 1.03 × the top: overflow
	cases := []struct {
		name string
		conv Conversion
		raw  float64
	}{
		{"NaN from the wire or a scale", bar, math.NaN()},
		{"+Inf", bar, math.Inf(1)},
		{"-Inf", bar, math.Inf(-1)},
		{"finite bar, infinite pascal", bar, 1e304},
		{"loop conversion overflows", Conversion{Loop: &huge}, 20.5},
		{"NaN loop current", Conversion{Loop: &huge}, math.NaN()},
		{"NaN loop current of a device", Conversion{Loop: &huge, KeepOutOfBand: true}, math.NaN()},
		{"device loop conversion overflows", Conversion{Loop: &huge, KeepOutOfBand: true}, 22},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r, err := c.conv.Finish("ref", Reading{Raw: c.raw, Wire: "7FC0 0000"})
			if !errors.Is(err, ErrOutOfRange) {
				t.Fatalf("err = %v, want out of range", err)
			}
			if KindOf(err) != KindOutOfRange || r.Pa != 0 || math.IsNaN(r.Raw) || math.IsInf(r.Raw, 0) {
				t.Errorf("reading %+v carries a non-number (kind %s)", r, KindOf(err))
			}
			if r.Wire != "7FC0 0000" {
				t.Errorf("wire %q lost: the audit text stays with a failed read", r.Wire)
			}
		})
	}
	if r, err := bar.Finish("ref", Reading{Raw: 1.01325}); err != nil || r.Pa != 101325 {
		t.Errorf("a finite reading: %+v %v", r, err)
	}
}

func mustUnit(t *testing.T, sym string) units.Unit {
	t.Helper()
	u, err := units.Lookup(sym)
	if err != nil {
		t.Fatal(err)
	}
	return u
}

// Whatever value reaches Finish, from any unit or loop range: a good reading
// is finite, and a refused one carries no NaN or Inf either.
func FuzzFinish(f *testing.F) {
	f.Add(1.01325, "bar", false, 0.0, 1e6)
	f.Add(12.0, "mA", true, -1e5, 9e5)
	f.Add(20.5, "mA", true, 0.0, 1.79e308)
	f.Add(1e304, "bar", false, 0.0, 0.0)
	f.Fuzz(func(t *testing.T, raw float64, unit string, loop bool, lo, hi float64) {
		var c Conversion
		if loop {
			if lo == hi || !finite(lo) || !finite(hi) || !finite(hi-lo) {
				return // NewCurrentLoop refuses such a range (TestNewConversion)
			}
			c.Loop = &CurrentLoop{LowerPa: lo, UpperPa: hi}
		} else {
			u, err := units.Lookup(unit)
			if err != nil {
				return
			}
			c.Unit = u
		}
		r, err := c.Finish("x", Reading{Raw: raw})
		if !finite(r.Raw) || !finite(r.Pa) {
			t.Fatalf("Finish(%g) = %+v, %v: carries a non-number", raw, r, err)
		}
		if err != nil && KindOf(err) != KindOutOfRange {
			t.Fatalf("Finish(%g): kind %s", raw, KindOf(err))
		}
	})
}
