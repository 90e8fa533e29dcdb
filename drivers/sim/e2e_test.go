package sim_test

import (
	"context"
	"math"
	"testing"
	"time"

	"plateau/config"
	"plateau/drivers"
	_ "plateau/drivers/all"
	"plateau/drivers/clock"
	"plateau/drivers/sim"
)

var epoch = time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)

// The project's real drivers, opened from the configuration the rig prints
// (the path 'plateau probe' takes), read the values the model serves, and
// the source driver moves the simulated pressure.
func TestRealDriversReadThePrintedConfig(t *testing.T) {
	for _, kind := range []string{sim.KindDigital, sim.KindTransmitter, sim.KindDial} {
		t.Run(kind, func(t *testing.T) {
			clk := clock.NewManual(epoch)
			rig, err := sim.New(config.Simulator{Seed: 11, Device: config.SimDevice{Kind: kind}}, clk)
			if err != nil {
				t.Fatal(err)
			}
			if _, err := rig.Start(t.Context()); err != nil {
				t.Fatal(err)
			}
			defer rig.Stop()
			text, err := rig.ConfigYAML()
			if err != nil {
				t.Fatal(err)
			}
			cfg, err := config.Parse([]byte(text), "printed.yaml")
			if err != nil {
				t.Fatalf("printed config rejected: %v\n%s", err, text)
			}
			env := drivers.OpenEnv{Clock: clk}
			ctx, cancel := context.WithTimeout(t.Context(), 10*time.Second)
			defer cancel()

			var src drivers.Source
			for _, in := range cfg.Instruments {
				if in.Role == config.RoleSource {
					if src, err = drivers.OpenSource(in, env); err != nil {
						t.Fatal(err)
					}
					defer src.Close()
				}
			}
			if err := src.SetPoint(ctx, 9.6e5); err != nil {
				t.Fatal(err)
			}
			clk.Advance(time.Minute)
			if r, ok := src.(drivers.Reacher); ok {
				if on, err := r.Reached(ctx); err != nil || !on {
					t.Errorf("reached = %v, %v after a minute", on, err)
				}
			}
			want := rig.Sample()
			if math.Abs(want.Source-9.6) > 1e-6 { // the setpoint travels as float32
				t.Fatalf("source driver moved the model to %v bar, want 9.6", want.Source)
			}
			for _, in := range cfg.Instruments {
				if in.Role == config.RoleSource || in.Link.Kind == config.LinkManual {
					continue
				}
				g, err := drivers.OpenGauge(in, env)
				if err != nil {
					t.Fatal(err)
				}
				got, err := g.Read(ctx)
				g.Close()
				if err != nil {
					t.Fatalf("%s: %v", in.Name, err)
				}
				var wantPa float64
				switch {
				case in.Role == config.RoleReference:
					wantPa = want.Reference * 1e5
				case kind == sim.KindTransmitter: // 4–20 mA over 0–16 bar
					wantPa = (want.Current - 4) / 16 * 16e5
				default:
					wantPa = want.Device * 1e5
				}
				if math.Abs(got.Pa-wantPa) > 1e-6*wantPa {
					t.Errorf("%s (%s %s): %v Pa (raw %v %s), want %v", in.Name, in.Link.Kind, in.Link.Address, got.Pa, got.Raw, got.RawUnit, wantPa)
				}
			}
			if err := src.Vent(ctx); err != nil {
				t.Fatal(err)
			}
			clk.Advance(time.Minute)
			if s := rig.Sample(); !s.Vented || math.Abs(s.Source) > 1e-9 {
				t.Errorf("after the driver vented: %+v", s)
			}
		})
	}
}

// Every sim_via a configuration can name reaches its part through the real
// driver for that transport.
func TestRealDriversEveryTransport(t *testing.T) {
	clk := clock.NewManual(epoch)
	rig, err := sim.New(config.Simulator{Seed: 12}, clk)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := rig.Start(t.Context()); err != nil {
		t.Fatal(err)
	}
	defer rig.Stop()
	if err := rig.SetPoint(4.2e5); err != nil {
		t.Fatal(err)
	}
	clk.Advance(time.Minute)
	want := rig.Sample()
	ctx, cancel := context.WithTimeout(t.Context(), 10*time.Second)
	defer cancel()
	for _, part := range []string{sim.PartReference, sim.PartDevice} {
		for _, via := range []string{config.LinkModbusTCP, config.LinkModbusRTU, config.LinkSerial} {
			in, err := rig.Resolve(config.Instrument{Name: part + "-" + via, Role: part, SimPart: part, SimVia: via,
				Link: config.Link{Kind: config.LinkSim, Timeout: time.Second}, Poll: time.Second})
			if err != nil {
				t.Fatal(err)
			}
			g, err := drivers.OpenGauge(in, drivers.OpenEnv{Clock: clk})
			if err != nil {
				t.Fatalf("%s: %v", in.Name, err)
			}
			got, err := g.Read(ctx)
			g.Close()
			if err != nil {
				t.Fatalf("%s: %v", in.Name, err)
			}
			w := want.Device
			if part == sim.PartReference {
				w = want.Reference
			}
			if math.Abs(got.Raw-w) > 1e-6*w {
				t.Errorf("%s: %v %s (wire %q), want %v", in.Name, got.Raw, got.RawUnit, got.Wire, w)
			}
		}
	}
}
