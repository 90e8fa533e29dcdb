package sim

import (
	"errors"
	"math"
	"testing"
	"time"

	"github.com/simonvetter/modbus"

	"plateau/config"
)

// The simulated room answers over its own Modbus TCP server, read with
// the library's client: its sensors near the truth (within their noise),
// the temperature drifting with the clock, and the reference in absolute
// mode reading the gauge reference plus the room's pressure.
func TestAmbientRoom(t *testing.T) {
	room := DefaultAmbient
	room.DriftKPerHour = 2
	r, clk, _, want := steadyRig(t, WithAmbient(room))
	c := modbusClient(t, "tcp://"+r.AmbientAddress(), time.Second)
	read := func(reg uint16) float64 { return readValue(t, c, modbus.INPUT_REGISTER, reg, "float32", "ABCD") }
	truth := r.AmbientTruth(clk.Now())
	for _, q := range []struct {
		name       string
		reg        uint16
		got, truth float64
		noise      float64
	}{
		{"temperature", RegAmbientTemperature, read(RegAmbientTemperature), truth.TemperatureC, room.TemperatureNoise},
		{"humidity", RegAmbientHumidity, read(RegAmbientHumidity), truth.HumidityPct, room.HumidityNoise},
		{"barometric", RegAmbientBarometric, read(RegAmbientBarometric) * 100, truth.BarometricPa, room.BarometricNoisePa},
	} {
		if math.Abs(q.got-q.truth) > 5*q.noise+1e-6*math.Abs(q.truth) { // float32 words: 7 digits
			t.Errorf("%s: read %g, truth %g (noise %g)", q.name, q.got, q.truth, q.noise)
		}
	}
	abs := read(RegAbsoluteReference)
	if wantAbs := want.Reference + truth.BarometricPa/1e5; !near32(abs, wantAbs) {
		t.Errorf("absolute reference %v bar, want %v (gauge %v + %v Pa)", abs, wantAbs, want.Reference, truth.BarometricPa)
	}
	t0 := read(RegAmbientTemperature)
	clk.Advance(30 * time.Minute)
	if d := read(RegAmbientTemperature) - t0; math.Abs(d-1) > 0.2 {
		t.Errorf("temperature moved %g K in 30 min, want about 1 K at 2 K/h", d)
	}
	if _, err := c.ReadRegisters(6, 4, modbus.INPUT_REGISTER); !errors.Is(err, modbus.ErrIllegalDataAddress) {
		t.Errorf("beyond the room's registers: %v", err)
	}
}

// Ambient instruments and an absolute-mode reference with link kind sim
// resolve onto the room's server; a gauge reference stays on the bench's.
func TestResolveAmbient(t *testing.T) {
	r, _, ep, _ := steadyRig(t)
	for _, c := range []struct {
		in   config.Instrument
		reg  int
		unit string
	}{
		{config.Instrument{Name: "room", Role: config.RoleAmbient, Measures: config.Measures{Quantity: "temperature"}}, RegAmbientTemperature, "°C"},
		{config.Instrument{Name: "hum", Role: config.RoleAmbient, Measures: config.Measures{Quantity: "humidity"}}, RegAmbientHumidity, "%RH"},
		{config.Instrument{Name: "baro", Role: config.RoleAmbient, Measures: config.Measures{Quantity: "barometric"}}, RegAmbientBarometric, "hPa"},
		{config.Instrument{Name: "ref", Role: config.RoleReference, Measures: config.Measures{Mode: "absolute"}}, RegAbsoluteReference, "bar"},
	} {
		c.in.Link.Kind = config.LinkSim
		out, err := r.Resolve(c.in)
		if err != nil {
			t.Fatalf("%s: %v", c.in.Name, err)
		}
		if out.Link.Kind != config.LinkModbusTCP || out.Link.Address != r.AmbientAddress() || out.Value.Register != c.reg || out.Value.Table != "input" || out.Unit != c.unit {
			t.Errorf("%s resolved to %+v", c.in.Name, out)
		}
	}
	gauge, err := r.Resolve(config.Instrument{Name: "ref", Role: config.RoleReference, Link: config.Link{Kind: config.LinkSim}})
	if err != nil || gauge.Link.Address != ep.TCP {
		t.Errorf("gauge reference: %+v %v", gauge.Link, err)
	}
	if _, err := r.Resolve(config.Instrument{Name: "wind", Role: config.RoleAmbient, Link: config.Link{Kind: config.LinkSim}, Measures: config.Measures{Quantity: "wind"}}); err == nil {
		t.Error("a wind sensor resolved")
	}
}
