package config

import (
	"fmt"
	"math"
	"strings"
	"testing"
	"time"
)

func TestSeveralDevices(t *testing.T) {
	cfg, err := Load("../testdata/config/devices.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if len(cfg.Warnings) != 0 {
		t.Fatalf("warnings: %v", cfg.Warnings)
	}
	if len(cfg.Devices) != 8 {
		t.Fatalf("%d devices", len(cfg.Devices))
	}
	for i, dut := range cfg.Devices {
		d := dut.Device
		wantID := fmt.Sprintf("PT-%d", 1001+i)
		if dut.Instrument != fmt.Sprintf("pt-%d", i+1) || dut.Index != i+1 || d.ID != wantID {
			t.Errorf("device %d: %s at %d, id %s", i, dut.Instrument, dut.Index, d.ID)
		}
		// Shared section: model, kind, range, class; own section: id, serial, height.
		if d.Model != "PT-16" || d.Kind != "transmitter" || d.UpperPa != 16e5 || d.Class != "0.25" || d.ResolutionPa != 100 {
			t.Errorf("device %d did not inherit the shared section: %+v", i, d)
		}
		if want := 0.05 * float64(i%4); math.Abs(dut.HeightM-want) > 1e-12 {
			t.Errorf("device %d height %v, want %v", i, dut.HeightM, want)
		}
		if in := cfg.Instruments[dut.Index]; in.Loop.UpperPa != 16e5 || in.Device.ID != wantID {
			t.Errorf("instrument %d: %+v", dut.Index, in)
		}
	}
	if cfg.Device != cfg.Devices[0].Device {
		t.Error("Device must be the first device")
	}
}

// Sixteen devices on one line: the file is accepted, each device judged
// on its own, and the line's load reported.
func TestSixteenDevices(t *testing.T) {
	var b strings.Builder
	b.WriteString(`device: {upper: 16 bar, resolution: 0.01 bar, class: "1"}
reference: {uncertainty: 0.01 %}
procedure: {decision: simple}
instruments:
  - {name: ref, role: reference, link: {kind: sim}, sim_part: reference}
`)
	for i := 1; i <= 16; i++ {
		fmt.Fprintf(&b, "  - {name: d%d, role: device, unit: bar, poll: 2s, link: {kind: modbus-rtu, address: /dev/ttyUSB1, unit_id: %d}, device: {id: D%d}}\n", i, i, i)
	}
	cfg, err := Parse([]byte(b.String()), "sixteen.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if len(cfg.Devices) != 16 || len(cfg.Warnings) != 0 {
		t.Fatalf("%d devices, warnings %v", len(cfg.Devices), cfg.Warnings)
	}
	lines := cfg.RTULines()
	if len(lines) != 1 || len(lines[0].Instruments) != 16 || lines[0].Asked != 8 {
		t.Fatalf("lines: %+v", lines)
	}
	// One device breaks a rule: the message names it.
	bad := strings.Replace(b.String(), "device: {id: D7}", "device: {id: D7, upper: 10 bar}", 1)
	_, err = Parse([]byte(bad), "sixteen.yaml")
	if err == nil || !strings.Contains(err.Error(), `is outside the range of device "d7" (instruments[7].device), 0 bar … 10 bar`) {
		t.Fatalf("got %v", err)
	}
}

// WireTime against the arithmetic done by hand: a read of two registers
// is an 8-character request and a 9-character reply, 11 bits each, plus
// two silences of 3.5 characters (the Modbus serial line framing,
// REFERENCES.md §0 row 9); above 19200 Bd the silence is 1.75 ms.
func TestWireTime(t *testing.T) {
	tests := []struct {
		baud, words int
		want        float64 // seconds
	}{
		{19200, 2, (17 + 7) * 11.0 / 19200},            // 13.75 ms
		{9600, 1, (15 + 7) * 11.0 / 9600},              // 25.2 ms
		{115200, 2, 17*11.0/115200 + 2*1.75e-3},        // 5.12 ms
		{38400, 4, 21*11.0/38400 + 2*1.75e-3},          // 9.52 ms
		{19200, 125, (8 + 5 + 250 + 7) * 11.0 / 19200}, // the longest read, 154.7 ms
	}
	for _, tc := range tests {
		got := WireTime(tc.baud, tc.words).Seconds()
		if math.Abs(got-tc.want) > 1e-9 {
			t.Errorf("%d Bd, %d words: %v s, want %v s", tc.baud, tc.words, got, tc.want)
		}
	}
	// A pause is quiet time: shorter than the silence it changes nothing,
	// longer it takes the silence's place.
	if a, b := TransactionTime(19200, 2, time.Millisecond), WireTime(19200, 2); a != b {
		t.Errorf("1 ms pause: %v, want %v", a, b)
	}
	if got, want := TransactionTime(19200, 2, 20*time.Millisecond).Seconds(), 20.5*11.0/19200+0.020; math.Abs(got-want) > 1e-9 {
		t.Errorf("20 ms pause: %v s, want %v s", got, want)
	}
}

func TestLineLoad(t *testing.T) {
	cfg, err := Load("../testdata/config/devices.yaml")
	if err != nil {
		t.Fatal(err)
	}
	l := cfg.RTULines()
	if len(l) != 1 || l[0].Asked != 8 {
		t.Fatalf("%+v", l)
	}
	// Eight float32 reads at 1 s: request, silence and reply, 20.5
	// characters, then the default 20 ms pause in place of the last silence.
	want := 1 / ((20.5 * 11.0 / 19200) + (20 * time.Millisecond).Seconds())
	if math.Abs(l[0].Carried-want) > 1e-6 {
		t.Fatalf("carried %v, want %v", l[0].Carried, want)
	}
}

// A device's own section inherits every key it leaves out, numbers with
// defaults included, also through a YAML merge key.
func TestDeviceInheritance(t *testing.T) {
	// The first device's section serves as the template of the second.
	file := `
device: {upper: 16 bar, resolution: 0.01 bar, class: "1", reference_temperature: 23, model: M-1}
reference: {uncertainty: 0.01 %}
instruments:
  - {name: ref, role: reference, link: {kind: sim}, sim_part: reference}
  - {name: a, role: device, unit: bar, link: {kind: modbus-tcp, address: "127.0.0.1:502"}, device: &common {id: A, model: M-2, resolution: 0.005 bar}}
  - {name: b, role: device, unit: bar, link: {kind: modbus-tcp, address: "127.0.0.1:502", unit_id: 2}, device: {<<: *common, id: B, reference_temperature: 0, grade: 2A}}
`
	cfg, err := Parse([]byte(file), "inherit.yaml")
	if err != nil {
		t.Fatal(err)
	}
	a, b := cfg.Devices[0].Device, cfg.Devices[1].Device
	if a.ID != "A" || a.Model != "M-2" || a.ReferenceTemperature != 23 || a.Class != "1" || a.ResolutionPa != 500 {
		t.Errorf("a: %+v", a)
	}
	if b.ID != "B" || b.Model != "M-2" || b.ReferenceTemperature != 0 || b.Class != "" || b.Grade != "2A" || b.ResolutionPa != 500 {
		t.Errorf("b: %+v", b)
	}
	if k := cfg.Devices[1].keyOf("id"); k != "instruments[2].device.id" {
		t.Errorf("b's id is at %s", k)
	}
	if k := cfg.Devices[1].keyOf("upper"); k != "device.upper" {
		t.Errorf("b's upper is at %s", k)
	}
}
