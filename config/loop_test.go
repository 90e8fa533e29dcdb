package config

import (
	"strings"
	"testing"
)

const loopBase = `
device: {kind: transmitter, lower: 0 bar, upper: 10 bar, resolution: 0.001 bar, limit: {span: 0.1 %}}
reference: {uncertainty: 0.01 %, upper: 20 bar, loop_meter: {uncertainty: 0.01 %, floor: 0.002 mA, resolution: 0.001 mA}}
procedure: {decision: simple}
instruments:
  - {name: ref, role: reference, link: {kind: sim}, sim_part: reference}
`

// The loop range is the device range or check refuses it, naming the line
// and key; the same range in another unit is the same range.
func TestLoopRangeMustBeDeviceRange(t *testing.T) {
	cases := []struct {
		name, loop, want string
	}{
		{"same range", "{enabled: true, lower: 0 bar, upper: 10 bar}", ""},
		{"same range in kPa", "{enabled: true, lower: 0 kPa, upper: 1000 kPa}", ""},
		{"other upper", "{enabled: true, lower: 0 bar, upper: 16 bar}", `loop.yaml:12: instruments[1].current_loop.upper = "16 bar": differs from the device range's upper end 10 bar (device.upper)`},
		{"other lower", "{enabled: true, lower: -1 bar, upper: 10 bar}", `instruments[1].current_loop.lower = "-1 bar": differs from the device range's lower end 0 bar`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			text := loopBase + `  - name: tx
    role: device
    link: {kind: modbus-tcp, address: "127.0.0.1:1502", unit_id: 1}
    unit: mA
    value: {table: input, register: 4, type: float32}
    current_loop: ` + c.loop + "\n"
			cfg, err := Parse([]byte(text), "loop.yaml")
			if c.want == "" {
				if err != nil {
					t.Fatal(err)
				}
				lo, hi, ok := cfg.OutputLoop("")
				m := cfg.Reference.LoopMeter
				if !ok || lo != 0 || hi != 10e5 || m.UncertaintyPct != 0.01 || m.FloorMA != 0.002 || m.ResolutionMA != 0.001 || m.Coverage != 2 {
					t.Errorf("loop %g … %g %v, meter %+v", lo, hi, ok, m)
				}
				return
			}
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("got %v\nwant %q", err, c.want)
			}
		})
	}
}

// A simulated transmitter is read as a current over the simulated range;
// a simulated digital gauge is not. A simulated range other than the
// device's is refused at the simulator's key.
func TestOutputLoopOfSimulatedDevice(t *testing.T) {
	for _, c := range []struct {
		kind string
		ok   bool
	}{{"transmitter", true}, {"digital", false}} {
		text := loopBase + "  - {name: dut, role: device, link: {kind: sim}, sim_part: device}\nsimulator: {device: {kind: " + c.kind + ", upper: 10 bar}}\n"
		text = strings.Replace(text, "kind: transmitter", "kind: "+c.kind, 1)
		cfg, err := Parse([]byte(text), "sim.yaml")
		if err != nil {
			t.Fatal(err)
		}
		lo, hi, ok := cfg.OutputLoop("")
		if ok != c.ok || (ok && (lo != 0 || hi != 10e5)) {
			t.Errorf("%s: %g … %g %v", c.kind, lo, hi, ok)
		}
	}
}

func TestLoopMeterValues(t *testing.T) {
	for _, c := range []struct{ key, val, want string }{
		{"resolution", "0.001 bar", "must be a current from 0 to 25 mA"},
		{"floor", "-0.002 mA", "must be a current from 0 to 25 mA"},
		{"floor", "30 mA", "must be a current from 0 to 25 mA"},
		{"uncertainty", "0.002 mA", `unknown pressure unit "mA"`},
		{"coverage", "0", "must be a coverage factor > 0"},
	} {
		text := strings.Replace(loopBase, "loop_meter: {", "loop_meter: {"+c.key+": "+c.val+", ", 1)
		text = strings.Replace(text, "uncertainty: 0.01 %, floor", "floor", 1)
		if c.key == "floor" || c.key == "resolution" {
			text = strings.Replace(text, ", "+c.key+": 0.00", ", x_"+c.key+": 0.00", 1)
		}
		_, err := Parse([]byte(text+"  - {name: dut, role: device, link: {kind: sim}, sim_part: device}\n"), "m.yaml")
		if err == nil || !strings.Contains(err.Error(), "reference.loop_meter."+c.key) || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s %s: %v", c.key, c.val, err)
		}
	}
}

func TestSimulatedLoopRange(t *testing.T) {
	text := loopBase + "  - {name: dut, role: device, link: {kind: sim}, sim_part: device}\nsimulator: {device: {kind: transmitter}}\n"
	_, err := Parse([]byte(text), "sim.yaml")
	want := `simulator.device.upper = "16 bar": differs from the device range's upper end 10 bar (device.upper)`
	if err == nil || !strings.Contains(err.Error(), want) {
		t.Fatalf("got %v\nwant %q", err, want)
	}
}
