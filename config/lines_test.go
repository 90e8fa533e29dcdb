package config

import (
	"math"
	"os"
	"strings"
	"testing"
)

// Simulated instruments reached over Modbus RTU share the simulator's one
// line at simulator.rtu.baud, and the line-capacity warning counts them as
// it counts a real line's instruments.
func TestSimulatedRTULineLoad(t *testing.T) {
	data, err := os.ReadFile("../testdata/config/sim-devices.yaml")
	if err != nil {
		t.Fatal(err)
	}
	text := strings.Replace(string(data), "baud: 19200", "baud: 9600", 1)
	cfg, err := Parse([]byte(text), "sim-devices.yaml")
	if err != nil {
		t.Fatal(err)
	}
	l := cfg.RTULines()
	// pg-1, pg-2 and pt-3 on the simulator's line; pg-4 (a line instrument)
	// and the reference and source (Modbus TCP) are not on it.
	if len(l) != 1 || l[0].Address != simRTULine || l[0].Baud != 9600 || len(l[0].Instruments) != 3 || l[0].Asked != 30 {
		t.Fatalf("lines: %+v", l)
	}
	// Float32 reads with no pause: 8 + 9 characters and two silences of 3.5,
	// 24 characters of 11 bits at 9600 Bd (the arithmetic of TestWireTime).
	if want := 9600 / (24 * 11.0); math.Abs(l[0].Carried-want) > 1e-6*want {
		t.Errorf("carried %v reads/s, want %v", l[0].Carried, want)
	}
	if len(cfg.Warnings) != 0 {
		t.Errorf("30 reads/s asked of a line carrying %.1f: warnings %v", l[0].Carried, cfg.Warnings)
	}
	// Ten times as often is more than the line carries: check says so.
	fast := strings.ReplaceAll(text, "sim_via: modbus-rtu\n    poll: 100ms", "sim_via: modbus-rtu\n    poll: 10ms")
	cfg, err = Parse([]byte(fast), "sim-devices.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if l := cfg.RTULines(); len(l) != 1 || l[0].Asked != 300 {
		t.Fatalf("lines at 10 ms: %+v", l)
	}
	found := false
	for _, w := range cfg.Warnings {
		found = found || strings.Contains(w.String(), "on "+simRTULine+" ask for 300.0 reads/s, but at 9600 Bd")
	}
	if !found {
		t.Errorf("no line-capacity warning for the simulator's line: %v", cfg.Warnings)
	}
}
