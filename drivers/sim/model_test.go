package sim

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"plateau/analysis"
	"plateau/config"
	"plateau/drivers/clock"
)

var t0 = time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)

// quiet is a simulator with no noise, no rounding and no device errors; a
// test switches on what it checks.
func quiet() config.Simulator {
	return config.Simulator{
		Seed:      7,
		Source:    config.SimSource{TimeConstant: time.Second, Leak: "0 Pa"},
		Reference: config.SimReference{Noise: "0 bar", Resolution: "0 bar", Error: "0 %", Unit: "bar"},
		Device: config.SimDevice{Kind: KindDigital, Zero: "0 bar", Span: "0 %", Nonlinearity: "0 bar",
			DeadBand: "0 bar", Resolution: "0 bar", Noise: "0 bar", Unit: "bar", Lower: "0 bar", Upper: "16 bar",
			OperatorDelay: 3 * time.Second},
	}
}

func newTestRig(t testing.TB, s config.Simulator) (*Rig, *clock.Manual) {
	t.Helper()
	clk := clock.NewManual(t0)
	r, err := New(s, clk)
	if err != nil {
		t.Fatal(err)
	}
	return r, clk
}

// settleAt drives the source to pa and waits 30 time constants (e^-30 of
// the step is left).
func settleAt(t *testing.T, r *Rig, clk *clock.Manual, pa float64) Sample {
	t.Helper()
	if err := r.SetPoint(pa); err != nil {
		t.Fatal(err)
	}
	clk.Advance(30 * time.Second)
	return r.Sample()
}

// The device's error at each pressure must be exactly its configured zero,
// span, non-linearity and hysteresis. The expected values are worked by
// hand from the model's definition (error = zero + span·p + bow·4x(1−x) ∓
// dead band/2, x = fraction of span) in bar, not from the model's code.
func TestDeviceErrorTable(t *testing.T) {
	cases := []struct {
		name                  string
		zero, span, bow, band string
		p                     float64 // bar
		wantUp, wantDown      float64 // bar
	}{
		{"perfect device", "0 bar", "0 %", "0 bar", "0 bar", 8, 0, 0},
		{"zero offset only", "0.02 bar", "0 %", "0 bar", "0 bar", 12, 0.02, 0.02},
		{"span 0.1 % at 16 bar", "0 bar", "0.1 %", "0 bar", "0 bar", 16, 0.016, 0.016},
		{"span 0.1 % at 4 bar", "0 bar", "0.1 %", "0 bar", "0 bar", 4, 0.004, 0.004},
		{"bow peaks at mid-span", "0 bar", "0 %", "0.03 bar", "0 bar", 8, 0.03, 0.03},
		{"bow at a quarter span (0.75 of peak)", "0 bar", "0 %", "0.03 bar", "0 bar", 4, 0.0225, 0.0225},
		{"bow vanishes at full scale", "0 bar", "0 %", "0.03 bar", "0 bar", 16, 0, 0},
		{"dead band splits up and down", "0 bar", "0 %", "0 bar", "0.04 bar", 8, -0.02, 0.02},
		// 0.02 zero + 0.004 span + 0.0225 bow (x = 0.25) ∓ 0.02 band.
		{"everything at 4 bar", "0.02 bar", "0.1 %", "0.03 bar", "0.04 bar", 4, 0.0265, 0.0665},
		// −0.01 zero − 0.024 span (0.2 % of 12) + 0.0225 bow (x = 0.75) ∓ 0.01 band.
		{"everything at 12 bar", "-0.01 bar", "-0.2 %", "0.03 bar", "0.02 bar", 12, -0.0215, -0.0015},
		{"zero as % of span", "0.125 %", "0 %", "0 bar", "0 bar", 8, 0.02, 0.02},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			s := quiet()
			s.Device.Zero, s.Device.Span, s.Device.Nonlinearity, s.Device.DeadBand = c.zero, c.span, c.bow, c.band
			r, clk := newTestRig(t, s)
			const tol = 1e-9 // bar
			p := c.p * 1e5

			// Rising: from vented, straight up to p.
			up := settleAt(t, r, clk, p)
			if got := up.Device - up.Reference; math.Abs(got-c.wantUp) > tol {
				t.Errorf("served error rising = %.6f bar, want %.6f", got, c.wantUp)
			}
			if got := r.DeviceError(p, analysis.Ascending) / 1e5; math.Abs(got-c.wantUp) > tol {
				t.Errorf("DeviceError(up) = %.6f bar, want %.6f", got, c.wantUp)
			}
			// Falling: over the top of the range (17 bar) and back down.
			settleAt(t, r, clk, 17e5)
			down := settleAt(t, r, clk, p)
			if got := down.Device - down.Reference; math.Abs(got-c.wantDown) > tol {
				t.Errorf("served error falling = %.6f bar, want %.6f", got, c.wantDown)
			}
			if got := r.DeviceError(p, analysis.Descending) / 1e5; math.Abs(got-c.wantDown) > tol {
				t.Errorf("DeviceError(down) = %.6f bar, want %.6f", got, c.wantDown)
			}
		})
	}
}

// The reference's own error is a % of reading; resolution rounds its display.
func TestReferenceErrorAndResolution(t *testing.T) {
	s := quiet()
	s.Reference.Error = "0.01 %"
	s.Reference.Resolution = "0.001 bar"
	s.Device.Resolution = "0.05 bar"
	s.Device.Zero = "0.013 bar"
	r, clk := newTestRig(t, s)
	got := settleAt(t, r, clk, 10e5)
	// 10 bar × 1.0001 = 10.001 bar; shown to 0.001 bar.
	if math.Abs(got.Reference-10.001) > 1e-9 {
		t.Errorf("reference = %.6f, want 10.001", got.Reference)
	}
	if e := r.ReferenceError(10e5); math.Abs(e-100) > 1e-9 {
		t.Errorf("ReferenceError(10 bar) = %g Pa, want 100", e)
	}
	// 10.013 bar on a 0.05 bar display reads 10.00.
	if math.Abs(got.Device-10.00) > 1e-9 {
		t.Errorf("device = %.6f, want 10.00", got.Device)
	}
}

// A first-order lag reaches 1 − 1/e (63.2 %) of a step after one time
// constant (definition of the time constant; common practice).
func TestSourceFirstOrder(t *testing.T) {
	r, clk := newTestRig(t, quiet())
	if err := r.SetPoint(10e5); err != nil {
		t.Fatal(err)
	}
	clk.Advance(time.Second)
	want := 10 * (1 - math.Exp(-1))
	if got := r.Sample().Source; math.Abs(got-want) > 1e-9 {
		t.Fatalf("after one τ the source is at %.6f bar, want %.6f", got, want)
	}
	if r.Sample().Reached {
		t.Fatal("reached after one time constant")
	}
	clk.Advance(30 * time.Second)
	if s := r.Sample(); !s.Reached || s.Vented {
		t.Fatalf("after 31 τ: reached=%v vented=%v", s.Reached, s.Vented)
	}
	if err := r.SetPoint(100e5); err == nil {
		t.Fatal("a setpoint far above the controller's ceiling was accepted")
	}
}

// The overshoot option peaks at the configured fraction of the step.
func TestSourceOvershoot(t *testing.T) {
	s := quiet()
	s.Source.Overshoot = 0.05
	r, clk := newTestRig(t, s)
	if err := r.SetPoint(10e5); err != nil {
		t.Fatal(err)
	}
	peak := 0.0
	for range 1000 {
		clk.Advance(10 * time.Millisecond)
		peak = max(peak, r.Sample().Source)
	}
	if math.Abs(peak-10.5) > 0.001 {
		t.Fatalf("peak %.4f bar, want 10.5 (5 %% of a 10 bar step)", peak)
	}
}

// A leak pulls the pressure toward atmosphere at the configured rate; a
// vent takes the system to zero.
func TestSourceLeakAndVent(t *testing.T) {
	s := quiet()
	s.Source.Leak = "10 Pa"
	r, clk := newTestRig(t, s)
	before := settleAt(t, r, clk, 5e5).Source
	clk.Advance(100 * time.Second)
	after := r.Sample().Source
	if drop := (before - after) * 1e5; math.Abs(drop-1000) > 1e-6 {
		t.Fatalf("leak over 100 s = %g Pa, want 1000", drop)
	}
	r.Vent()
	clk.Advance(30 * time.Second)
	if got := r.Sample(); math.Abs(got.Source) > 1e-9 || !got.Vented {
		t.Fatalf("after vent: %.6f bar, vented=%v", got.Source, got.Vented)
	}
}

// Loop current follows 4 mA + 16 mA × fraction of span; test vector for a
// 0–10 bar transmitter from REFERENCES.md §7.
func TestTransmitterCurrent(t *testing.T) {
	s := quiet()
	s.Device.Kind = KindTransmitter
	s.Device.Upper = "10 bar"
	r, clk := newTestRig(t, s)
	for _, c := range []struct{ bar, mA float64 }{{0, 4}, {2.5, 8}, {5, 12}, {7.5, 16}, {10, 20}} {
		if got := settleAt(t, r, clk, c.bar*1e5).Current; math.Abs(got-c.mA) > 1e-9 {
			t.Errorf("%g bar: %g mA, want %g", c.bar, got, c.mA)
		}
	}
	// Over range the output saturates at 20.5 mA (NAMUR NE 43 band, §7).
	if got := settleAt(t, r, clk, 10.9e5).Current; got != 20.5 {
		t.Errorf("over range: %g mA, want 20.5", got)
	}
}

// Same seed and same clock times give the same samples however often the
// rig is asked in between; another seed gives other noise.
func TestDeterminism(t *testing.T) {
	s := WithDefaults(config.Simulator{Seed: 42})
	s.Source.Overshoot = 0.03
	run := func(seed int64, every time.Duration) []Sample {
		s.Seed = seed
		r, clk := newTestRig(t, s)
		var out []Sample
		for _, sp := range []float64{4e5, 8e5, 12e5, 8e5, 4e5} {
			if err := r.SetPoint(sp); err != nil {
				t.Fatal(err)
			}
			for el := time.Duration(0); el < 20*time.Second; el += every {
				clk.Advance(every)
				if every < time.Second { // the busy reader looks often, keeps nothing
					r.Sample()
				}
			}
			out = append(out, r.Sample())
		}
		return out
	}
	a, b, c := run(42, 50*time.Millisecond), run(42, 20*time.Second), run(43, 20*time.Second)
	for i := range a {
		if a[i] != b[i] {
			t.Fatalf("step %d differs with the reading rate:\n%+v\n%+v", i, a[i], b[i])
		}
	}
	same := 0
	for i := range a {
		if a[i].Reference == c[i].Reference {
			same++
		}
	}
	if same == len(a) {
		t.Fatal("another seed gave the same reference noise at every step")
	}
}

// Bad settings are reported with the key that holds them, all at once.
func TestParamsErrors(t *testing.T) {
	s := quiet()
	s.Device.Zero = "0.02"
	s.Device.Span = "0.1 bar"
	s.Device.Kind = "bourdon"
	s.Faults.Drop = 2
	_, err := New(s, clock.NewManual(t0))
	if err == nil {
		t.Fatal("no error")
	}
	for _, key := range []string{"simulator.device.zero", "simulator.device.span", "simulator.device.kind", "simulator.faults.drop"} {
		if !strings.Contains(err.Error(), key) {
			t.Errorf("error does not name %s:\n%v", key, err)
		}
	}
}

// The simulated operator reads the dial only after the pointer has stopped
// and operator_delay has passed, rounded to the dial's resolution.
func TestOperatorReadsSettledDial(t *testing.T) {
	s := quiet()
	s.Device.Kind = KindDial
	s.Device.Resolution = "0.1 bar"
	s.Device.Zero = "0.08 bar"
	s.Device.DeadBand = "0.04 bar"
	r, clk := newTestRig(t, s)
	if err := r.SetPoint(8e5); err != nil {
		t.Fatal(err)
	}
	start := clk.Now()
	done := make(chan struct{})
	go func() { // the clock runs while the operator watches
		for {
			select {
			case <-done:
				return
			default:
				clk.Advance(50 * time.Millisecond)
				time.Sleep(100 * time.Microsecond)
			}
		}
	}()
	got, err := r.Operator().Read(t.Context())
	close(done)
	if err != nil {
		t.Fatal(err)
	}
	// 8 bar + 0.08 zero − 0.02 (half the dead band, rising) = 8.06 → 8.1 on a 0.1 bar dial.
	if math.Abs(got.Raw-8.1) > 1e-9 || got.RawUnit != "bar" || math.Abs(got.Pa-8.1e5) > 1e-3 {
		t.Errorf("operator read %+v, want 8.1 bar", got)
	}
	// The pointer of a τ = 1 s source moves less than a quarter division
	// per second only after about 5.3 τ; then 3 s of operator delay.
	if el := got.Time.Sub(start); el < 8*time.Second {
		t.Errorf("operator answered %v after the step, before the pointer settled and the delay passed", el)
	}
	in, err := r.Resolve(config.Instrument{Name: "dial", Role: config.RoleDevice, Link: config.Link{Kind: config.LinkSim}, SimPart: PartDevice})
	if !errors.Is(err, ErrNotStarted) {
		t.Errorf("resolve before start: %+v, %v", in, err)
	}
}
