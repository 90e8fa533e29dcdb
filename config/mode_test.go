package config

import (
	"fmt"
	"math"
	"strings"
	"testing"
)

const modeBase = `
device: {upper: 16 bar, resolution: 0.01 bar, class: "1"%s}
reference: {uncertainty: 0.01 %%, lower: %s, upper: %s}
procedure: {points: [0 %%, 20 %%, 40 %%, 60 %%, 80 %%, 100 %%], decision: simple}
instruments:
  - {name: ref, role: reference, link: {kind: sim}, sim_part: reference%s}
  - {name: dut, role: device, link: {kind: sim}, sim_part: device}
`

func modeFile(device, refLower, refUpper, refExtra, extra string) string {
	return fmt.Sprintf(modeBase, device, refLower, refUpper, refExtra) + extra
}

const barometer = "  - {name: baro, role: ambient, quantity: barometric, unit: hPa, uncertainty: 0.3 hPa, poll: 1s, link: {kind: modbus-tcp, address: \"127.0.0.1:1502\"}, value: {table: input, register: 4}}\n"

func TestModes(t *testing.T) {
	cases := []struct {
		name      string
		file      string
		want      string // a fragment of the error; "" for none
		ref, dev  string
		converted bool
	}{
		{"defaults are gauge", modeFile("", "0 bar", "20 bar", "", ""), "", ModeGauge, ModeGauge, false},
		{"absolute reference without a barometer", modeFile("", "0 bar", "20 bar", ", mode: absolute", ""),
			"comparing them needs a barometer", "", "", false},
		{"absolute reference with a barometer", modeFile("", "0 bar(a)", "20 bar(a)", ", mode: absolute", barometer), "", ModeAbsolute, ModeGauge, true},
		{"mode from the reference range's spelling", modeFile("", "0 bara", "20 bara", "", barometer), "", ModeAbsolute, ModeGauge, true},
		{"absolute everywhere needs no barometer", modeFile(", mode: absolute", "0 bar", "20 bar", ", mode: absolute", ""), "", ModeAbsolute, ModeAbsolute, false},
		{"device mode from its unit", modeFile(", unit: bar(a)", "0 bar", "20 bar", ", mode: absolute", ""), "", ModeAbsolute, ModeAbsolute, false},
		{"device unit and mode disagree", modeFile(", unit: psig, mode: absolute", "0 bar", "20 bar", "", ""), "reads gauge pressure, but device.mode says absolute", "", "", false},
		{"an absolute reference too small for the gauge range at 1 atm", modeFile("", "0 bar(a)", "16.5 bar(a)", ", mode: absolute", barometer), "the reference cannot cover the device range up to 16 bar", "", "", false},
		{"an absolute reference that starts at 1 bar covers 0 bar gauge", modeFile("", "1 bar(a)", "20 bar(a)", ", mode: absolute", barometer), "", ModeAbsolute, ModeGauge, true},
		{"the range spelling and the instrument disagree", modeFile("", "0 bar(a)", "20 bar(a)", ", mode: gauge", ""), "its range in reference: is written absolute", "", "", false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cfg, err := Parse([]byte(c.file), "mode.yaml")
			if c.want != "" {
				if err == nil || !strings.Contains(err.Error(), c.want) {
					t.Fatalf("want an error with %q, got %v", c.want, err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if got := InstrumentMode(cfg.Instruments[0]); got != c.ref {
				t.Errorf("reference mode %q, want %q", got, c.ref)
			}
			if got := cfg.BenchMode(); got != c.dev || cfg.Devices[0].Device.Mode != c.dev || cfg.Instruments[1].Mode != c.dev {
				t.Errorf("bench mode %q (device %q, instrument %q), want %q", got, cfg.Devices[0].Device.Mode, cfg.Instruments[1].Mode, c.dev)
			}
			if got := cfg.Converted(cfg.Instruments[0]); got != c.converted {
				t.Errorf("reference converted %v, want %v", got, c.converted)
			}
		})
	}
}

func TestAmbientInstruments(t *testing.T) {
	file := modeFile(", conditions: {temperature: 68 ± 3.6 °F, humidity: 30 … 70 %RH}", "0 bar", "20 bar", "", barometer+
		"  - {name: room, role: ambient, quantity: Temperature, unit: K, uncertainty: 0.2 K, poll: 1s, link: {kind: modbus-tcp, address: \"127.0.0.1:1502\"}, value: {table: input, register: 0}}\n"+
		"  - {name: hum, role: ambient, quantity: humidity, unit: \"%RH\", poll: 1s, link: {kind: modbus-tcp, address: \"127.0.0.1:1502\"}, value: {table: input, register: 2}}\n")
	cfg, err := Parse([]byte(file), "ambient.yaml")
	if err != nil {
		t.Fatal(err)
	}
	amb := cfg.Ambient()
	if len(amb) != 3 || amb[0].Kind != "barometric" || amb[1].Kind != "temperature" || amb[2].Kind != "humidity" {
		t.Fatalf("ambient instruments: %+v", amb)
	}
	if math.Abs(amb[0].UncertaintyBase-30) > 1e-9 || math.Abs(amb[1].UncertaintyBase-0.2) > 1e-12 {
		t.Errorf("uncertainties %g Pa, %g K", amb[0].UncertaintyBase, amb[1].UncertaintyBase)
	}
	if InstrumentMode(cfg.Instruments[2]) != ModeAbsolute {
		t.Errorf("the barometer reads %q", cfg.Instruments[2].Mode)
	}
	d := cfg.Device
	// 68 ± 3.6 °F is 20 ± 2 °C (t/°C = (t/°F − 32)/1.8, NIST SP 811 B.8).
	if tc := d.Conditions.TemperatureC; tc == nil || math.Abs(tc.Low-18) > 1e-9 || math.Abs(tc.High-22) > 1e-9 {
		t.Errorf("temperature conditions %+v", tc)
	}
	if d.ReferenceTemperature != 20 || math.Abs(cfg.Devices[0].Device.ReferenceTemperature-20) > 1e-9 {
		t.Errorf("reference temperature %g", d.ReferenceTemperature)
	}
	if h := d.Conditions.HumidityPct; h == nil || h.Low != 30 || h.High != 70 {
		t.Errorf("humidity conditions %+v", h)
	}

	// The reference conditions move the budget's reference temperature
	// unless the file gives it apart, and then they must hold it.
	moved := strings.Replace(file, "conditions: {temperature: 68 ± 3.6 °F", "reference_temperature: 23, conditions: {temperature: 68 ± 3.6 °F", 1)
	if _, err := Parse([]byte(moved), "ambient.yaml"); err == nil || !strings.Contains(err.Error(), "does not hold device.reference_temperature (23 °C)") {
		t.Errorf("reference temperature outside the conditions: %v", err)
	}
	two := file + "  - {name: room2, role: ambient, quantity: temperature, unit: °C, link: {kind: modbus-tcp, address: \"127.0.0.1:1502\"}, value: {register: 8}}\n"
	if _, err := Parse([]byte(two), "ambient.yaml"); err == nil || !strings.Contains(err.Error(), "already reads the temperature") {
		t.Errorf("two thermometers: %v", err)
	}
	onDevice := strings.Replace(file, "sim_part: device}", "sim_part: device, quantity: temperature}", 1)
	if _, err := Parse([]byte(onDevice), "ambient.yaml"); err == nil || !strings.Contains(err.Error(), "instruments[1].quantity") {
		t.Errorf("quantity on a device: %v", err)
	}
}

// A barometer that converts the reference is polled often enough for its
// reading to be fresh, and its uncertainty is asked for.
func TestConvertingBarometer(t *testing.T) {
	file := modeFile("", "0 bar(a)", "20 bar(a)", ", mode: absolute", strings.Replace(barometer, "poll: 1s", "poll: 5m", 1))
	if _, err := Parse([]byte(file), "mode.yaml"); err == nil || !strings.Contains(err.Error(), "instruments[2].poll = \"5m0s\": the barometer converts every reading") {
		t.Errorf("a barometer polled every 5 min: %v", err)
	}
	file = modeFile("", "0 bar(a)", "20 bar(a)", ", mode: absolute", strings.Replace(barometer, "uncertainty: 0.3 hPa, ", "", 1))
	cfg, err := Parse([]byte(file), "mode.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if len(cfg.Warnings) != 1 || !strings.Contains(cfg.Warnings[0].String(), "its uncertainty belongs in the budget") {
		t.Errorf("warnings %v", cfg.Warnings)
	}
}
