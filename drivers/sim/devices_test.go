package sim_test

import (
	"context"
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"plateau/analysis"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
	"plateau/drivers/sim"
)

// fourDevices is an invented bench of four devices with different errors
// (test data, not a real instrument), all 0–16 bar: a digital gauge, a
// transmitter, a digital gauge in kPa and a coarse gauge with friction.
func fourDevices() config.Simulator {
	unit := func(name, kind, zero, span, bow, band, res, u, upper string) config.SimUnit {
		return config.SimUnit{Instrument: name, SimDevice: config.SimDevice{Kind: kind, Zero: zero, Span: span,
			Nonlinearity: bow, DeadBand: band, Resolution: res, Noise: "0 bar", Unit: u, Lower: "0 bar", Upper: upper}}
	}
	return config.Simulator{
		Seed:      5,
		Reference: config.SimReference{Noise: "0 bar", Resolution: "0 bar", Error: "0 %", Unit: "bar"},
		Devices: []config.SimUnit{
			unit("pt-1", sim.KindDigital, "0.02 bar", "0.1 %", "0.01 bar", "0.02 bar", "0.001 bar", "bar", "16 bar"),
			unit("pt-2", sim.KindTransmitter, "-0.03 bar", "-0.2 %", "0 bar", "0 bar", "0 bar", "bar", "16 bar"),
			unit("pt-3", sim.KindDigital, "5 kPa", "0.05 %", "-2 kPa", "1 kPa", "0.1 kPa", "kPa", "1600 kPa"),
			unit("pt-4", sim.KindDigital, "0 bar", "0.3 %", "0.02 bar", "0.04 bar", "0.01 bar", "bar", "16 bar"),
		},
	}
}

// startDevices starts a rig of s on a manual clock at epoch; it stops
// when the test ends.
func startDevices(t *testing.T, s config.Simulator, opts ...sim.Option) (*sim.Rig, sim.Endpoints, *clock.Manual) {
	t.Helper()
	clk := clock.NewManual(epoch)
	rig, err := sim.New(s, clk, opts...)
	if err != nil {
		t.Fatal(err)
	}
	ep, err := rig.Start(t.Context())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(rig.Stop)
	return rig, ep, clk
}

// openDevice resolves a simulated device instrument onto the rig's real
// transport via and opens the project's driver on it.
func openDevice(t *testing.T, rig *sim.Rig, name, via string, clk clock.Clock) drivers.Gauge {
	t.Helper()
	in, err := rig.Resolve(config.Instrument{Name: name, Role: config.RoleDevice, SimPart: sim.PartDevice, SimVia: via,
		Link: config.Link{Kind: config.LinkSim, Timeout: 300 * time.Millisecond}, Poll: 100 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	g, err := drivers.OpenGauge(in, drivers.OpenEnv{Clock: clk})
	if err != nil {
		t.Fatalf("%s over %s: %v", name, via, err)
	}
	t.Cleanup(func() { g.Close() })
	return g
}

// Four devices on one rig: each is served at its own unit id on the one
// RTU line, at its own unit id over TCP and on its own line instrument, and
// each reads its own indication; the truth each exposes is its own.
func TestSeveralDevicesEachServeTheirOwn(t *testing.T) {
	rig, ep, clk := startDevices(t, fourDevices())
	if rig.Devices() != 4 || len(ep.Devices) != 4 {
		t.Fatalf("%d devices, %d endpoints", rig.Devices(), len(ep.Devices))
	}
	if err := rig.SetPoint(6.4e5); err != nil {
		t.Fatal(err)
	}
	clk.Advance(time.Minute)
	ctx, cancel := context.WithTimeout(t.Context(), 10*time.Second)
	defer cancel()
	for k, d := range ep.Devices {
		if d.UnitID != k+1 {
			t.Errorf("device %d at unit %d", k+1, d.UnitID)
		}
		want := rig.DeviceSample(k)
		wantPa := want.Device * unitPa(t, fourDevices().Devices[k].Unit)
		for _, via := range []string{config.LinkModbusRTU, config.LinkModbusTCP, config.LinkSerial} {
			g := openDevice(t, rig, d.Instrument, via, clk)
			r, err := g.Read(ctx)
			if err != nil {
				t.Fatalf("%s over %s: %v", d.Instrument, via, err)
			}
			// The line instrument prints the resolution's digits; a
			// transmitter's current is read to 1 µA there (1e-3/16 of span).
			tol := 1e-6 * math.Abs(wantPa)
			if via == config.LinkSerial {
				tol = max(tol, 16e5*1e-3/16)
			}
			if math.Abs(r.Pa-wantPa) > tol+1e-3 {
				t.Errorf("%s over %s: %.1f Pa, device %d shows %.1f Pa", d.Instrument, via, r.Pa, k+1, wantPa)
			}
		}
		// The known error differs from device to device.
		if k > 0 && rig.DeviceErrorOf(k, 5e5, analysis.Ascending) == rig.DeviceErrorOf(k-1, 5e5, analysis.Ascending) {
			t.Errorf("devices %d and %d have the same error", k, k+1)
		}
		if i, ok := rig.DeviceIndex(d.Instrument); !ok || i != k {
			t.Errorf("DeviceIndex(%s) = %d, %v", d.Instrument, i, ok)
		}
	}
	// A unit id no device has stays silent on the RTU line.
	in, err := rig.Resolve(config.Instrument{Name: "pt-1", Role: config.RoleDevice, SimPart: sim.PartDevice, SimVia: config.LinkModbusRTU,
		Link: config.Link{Kind: config.LinkSim, Timeout: 300 * time.Millisecond}, Poll: 100 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	in.Link.UnitID, in.Link.Retries = 9, 0
	g, err := drivers.OpenGauge(in, drivers.OpenEnv{Clock: clk})
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	if _, err := g.Read(ctx); drivers.KindOf(err) != drivers.KindTimeout {
		t.Errorf("unit 9 on a line of four: %v (kind %s), want a time-out", err, drivers.KindOf(err))
	}
	if _, err := rig.Resolve(config.Instrument{Name: "pt-9", Role: config.RoleDevice, SimPart: sim.PartDevice, Link: config.Link{Kind: config.LinkSim}}); err == nil {
		t.Error("an instrument no simulator.devices entry names was resolved")
	}
}

func unitPa(t *testing.T, symbol string) float64 {
	t.Helper()
	switch symbol {
	case "bar":
		return 1e5
	case "kPa":
		return 1e3
	}
	t.Fatalf("unit %s", symbol)
	return 0
}

// Cutting one device's link silences it on every transport, for good; the
// other devices and the reference go on answering.
func TestCutLinkSilencesOneDevice(t *testing.T) {
	rig, ep, clk := startDevices(t, fourDevices(), sim.WithDropHold(50*time.Millisecond))
	ctx, cancel := context.WithTimeout(t.Context(), 20*time.Second)
	defer cancel()
	vias := []string{config.LinkModbusRTU, config.LinkModbusTCP, config.LinkSerial}
	gauges := map[string]drivers.Gauge{}
	for _, d := range ep.Devices {
		for _, via := range vias {
			gauges[d.Instrument+" "+via] = openDevice(t, rig, d.Instrument, via, clk)
		}
	}
	if err := rig.CutLink(2); err != nil {
		t.Fatal(err)
	}
	if err := rig.CutLink(7); err == nil {
		t.Error("cut of a device the rig does not hold accepted")
	}
	for round := range 2 {
		clk.Advance(time.Hour) // cut for good: time does not bring it back
		for _, d := range ep.Devices {
			for _, via := range vias {
				_, err := gauges[d.Instrument+" "+via].Read(ctx)
				if d.Instrument == "pt-3" && err == nil {
					t.Errorf("round %d: cut device answered over %s", round, via)
				}
				if d.Instrument != "pt-3" && err != nil {
					t.Errorf("round %d: %s over %s: %v", round, d.Instrument, via, err)
				}
			}
		}
	}
	if !rig.LinkCut(2) || rig.LinkCut(1) {
		t.Errorf("LinkCut: %v %v", rig.LinkCut(2), rig.LinkCut(1))
	}
	ref, err := rig.Resolve(config.Instrument{Name: "ref", Role: config.RoleReference, SimPart: sim.PartReference, SimVia: config.LinkModbusTCP,
		Link: config.Link{Kind: config.LinkSim, Timeout: 300 * time.Millisecond}, Poll: 100 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	ref.Link.UnitID = 3 // the cut device's unit: the gateway still serves the reference
	g, err := drivers.OpenGauge(ref, drivers.OpenEnv{Clock: clk})
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	if _, err := g.Read(ctx); err != nil {
		t.Errorf("reference at the cut device's unit id over TCP: %v", err)
	}
}

// simulator.devices[i].cut_at cuts a link at a moment of the rig's clock.
func TestCutAtTime(t *testing.T) {
	s := fourDevices()
	s.Devices[1].CutAt = 10 * time.Minute
	rig, _, clk := startDevices(t, s)
	g := openDevice(t, rig, "pt-2", config.LinkModbusRTU, clk)
	ctx := t.Context()
	clk.Advance(9 * time.Minute)
	if _, err := g.Read(ctx); err != nil {
		t.Fatalf("before cut_at: %v", err)
	}
	clk.Advance(time.Minute)
	if _, err := g.Read(ctx); err == nil {
		t.Error("answered at cut_at")
	}
}

// Every simulator.devices problem names its key.
func TestSeveralDevicesSettingsErrors(t *testing.T) {
	s := fourDevices()
	s.Devices[1].Instrument = ""
	s.Devices[2].Instrument = "pt-1"
	s.Devices[3].Kind = "barometer"
	s.Devices[3].Upper = "-1 bar"
	_, err := sim.New(s, clock.NewManual(epoch))
	if err == nil {
		t.Fatal("accepted")
	}
	for _, want := range []string{"simulator.devices[1].instrument", "simulator.devices[2].instrument = \"pt-1\"",
		"simulator.devices[3].kind", "simulator.devices[3].upper"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("no %q in:\n%v", want, err)
		}
	}
}

// The printed configuration of a four-device rig holds one device
// instrument per simulated device, all on the one RTU line at their own
// unit ids, each with its own device section; the config package accepts
// it and each instrument reads its own device.
func TestConfigYAMLSeveralDevices(t *testing.T) {
	rig, ep, clk := startDevices(t, fourDevices())
	text, err := rig.ConfigYAML()
	if err != nil {
		t.Fatal(err)
	}
	cfg, err := config.Parse([]byte(text+"store: {path: x.db}\nlisten: {socket: x.sock}\n"), "printed.yaml")
	if err != nil {
		t.Fatalf("printed config rejected: %v\n%s", err, text)
	}
	if len(cfg.Devices) != 4 {
		t.Fatalf("%d devices in the printed configuration:\n%s", len(cfg.Devices), text)
	}
	if err := rig.SetPoint(8e5); err != nil {
		t.Fatal(err)
	}
	clk.Advance(time.Minute)
	for k, dut := range cfg.Devices {
		in := cfg.Instruments[dut.Index]
		if in.Link.Kind != config.LinkModbusRTU || in.Link.Address != ep.RTU || in.Link.UnitID != k+1 {
			t.Errorf("%s: link %+v, want the RTU line at unit %d", in.Name, in.Link, k+1)
		}
		if want := fmt.Sprintf("SIM-DUT-%d", k+1); dut.Device.ID != want {
			t.Errorf("%s: id %q, want %q", in.Name, dut.Device.ID, want)
		}
		g, err := drivers.OpenGauge(in, drivers.OpenEnv{Clock: clk})
		if err != nil {
			t.Fatal(err)
		}
		r, err := g.Read(t.Context())
		g.Close()
		if err != nil {
			t.Fatalf("%s: %v", in.Name, err)
		}
		want := rig.DeviceSample(k).Device * unitPa(t, fourDevices().Devices[k].Unit)
		if math.Abs(r.Pa-want) > 1e-6*want {
			t.Errorf("%s read %.1f Pa, device %d shows %.1f Pa", in.Name, r.Pa, k+1, want)
		}
	}
}

// With rtu.wire_time on, no read over the simulated line is quicker than
// the request and the reply take on a real line at its baud.
func TestWireTimeHoldsReplies(t *testing.T) {
	s := fourDevices()
	s.RTU = config.SimRTU{Baud: 9600, WireTime: true}
	rig, _, clk := startDevices(t, s)
	g := openDevice(t, rig, "pt-1", config.LinkModbusRTU, clk)
	// Request 8 characters, 3.5 of silence, reply 5 + 2·2: 20.5 characters
	// of 11 bits (Modbus over Serial Line V1.02 §2.5.1).
	least := 205 * 11 * time.Second / 96000
	for range 5 {
		start := time.Now()
		if _, err := g.Read(t.Context()); err != nil {
			t.Fatal(err)
		}
		if took := time.Since(start); took < least {
			t.Errorf("read took %s, the wire needs at least %s", took, least)
		}
	}
}
