package sim

import (
	"bufio"
	"context"
	"errors"
	"io"
	"log"
	"math"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/simonvetter/modbus"
	"go.bug.st/serial"

	"plateau/config"
	"plateau/drivers/clock"
	"plateau/drivers/regcodec"
)

// startRig starts a rig on a manual clock and stops it when the test ends.
func startRig(t *testing.T, s config.Simulator, opts ...Option) (*Rig, *clock.Manual, Endpoints) {
	t.Helper()
	r, clk := newTestRig(t, s)
	for _, o := range opts {
		o(r)
	}
	ep, err := r.Start(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(r.Stop)
	return r, clk, ep
}

func modbusClient(t *testing.T, url string, timeout time.Duration) *modbus.ModbusClient {
	t.Helper()
	c, err := modbus.NewClient(&modbus.ClientConfiguration{URL: url, Timeout: timeout, Speed: 19200, Parity: modbus.PARITY_EVEN, StopBits: 1,
		Logger: log.New(io.Discard, "", 0)})
	if err != nil {
		t.Fatal(err)
	}
	if err := c.Open(); err != nil {
		t.Fatalf("open %s: %v", url, err)
	}
	t.Cleanup(func() { c.Close() })
	return c
}

func readValue(t *testing.T, c *modbus.ModbusClient, table modbus.RegType, addr uint16, typ, order string) float64 {
	t.Helper()
	spec, err := regcodec.ParseSpec(typ, order)
	if err != nil {
		t.Fatal(err)
	}
	words, err := c.ReadRegisters(addr, uint16(spec.Words()), table)
	if err != nil {
		t.Fatalf("read %d: %v", addr, err)
	}
	v, err := regcodec.Decode(words, spec)
	if err != nil {
		t.Fatal(err)
	}
	return v
}

// steadyRig is a rig holding 6.4 bar with visible device errors and noise;
// on a manual clock every read sees the same instant, so a client's value
// must equal the model's exactly (to float32 precision).
func steadyRig(t *testing.T, opts ...Option) (*Rig, *clock.Manual, Endpoints, Sample) {
	s := WithDefaults(config.Simulator{Seed: 3})
	r, clk, ep := startRig(t, s, opts...)
	want := settleAt(t, r, clk, 6.4e5)
	return r, clk, ep, want
}

func near32(got, want float64) bool { return math.Abs(got-want) <= 1e-6*math.Max(1, math.Abs(want)) }

// Every measured register, read back over Modbus TCP with the library's
// client and the project codec, gives the model's value.
func TestTCPServesTheModel(t *testing.T) {
	_, _, ep, want := steadyRig(t)
	c := modbusClient(t, "tcp://"+ep.TCP, time.Second)
	for _, reg := range ep.Registers {
		if reg.Type == "bool" || reg.Table == "holding" && reg.Name != "source" {
			continue
		}
		for _, table := range []modbus.RegType{modbus.INPUT_REGISTER, modbus.HOLDING_REGISTER} {
			if reg.Table == "holding" && table == modbus.INPUT_REGISTER {
				continue
			}
			got := readValue(t, c, table, uint16(reg.Addr), reg.Type, reg.Order) * scaleOf(reg)
			w := reg.value(want)
			if reg.Scale != 0 && math.Abs(got-w) <= reg.Scale/2 { // an integer register holds whole counts
				continue
			}
			if !near32(got, w) {
				t.Errorf("%s (table %v, %d %s/%s) = %v, want %v", reg.Name, table, reg.Addr, reg.Type, reg.Order, got, w)
			}
		}
	}
	if _, err := c.ReadRegisters(50, 1, modbus.INPUT_REGISTER); !errors.Is(err, modbus.ErrIllegalDataAddress) {
		t.Errorf("unmapped register: %v, want illegal data address", err)
	}
}

// The source is driven over TCP: setpoint (FC16), reached input, vent coil;
// a setpoint beyond the controller's ceiling is refused.
func TestTCPDrivesTheSource(t *testing.T) {
	r, clk, ep := startRig(t, quiet())
	c := modbusClient(t, "tcp://"+ep.TCP, time.Second)
	if err := c.WriteFloat32(RegSetpoint, 8); err != nil { // library default order is ABCD
		t.Fatal(err)
	}
	clk.Advance(30 * time.Second)
	if got := r.Sample().Source; math.Abs(got-8) > 1e-9 {
		t.Fatalf("source at %g bar after setpoint 8", got)
	}
	on, err := c.ReadDiscreteInput(InputReached)
	if err != nil || !on {
		t.Fatalf("reached input = %v, %v", on, err)
	}
	if err := c.WriteFloat32(RegSetpoint, 1000); !errors.Is(err, modbus.ErrIllegalDataValue) {
		t.Fatalf("setpoint 1000 bar: %v, want illegal data value", err)
	}
	if err := c.WriteRegister(RegSource, 1); !errors.Is(err, modbus.ErrIllegalDataAddress) {
		t.Fatalf("write to the read-only source register: %v", err)
	}
	if err := c.WriteCoil(CoilVent, true); err != nil {
		t.Fatal(err)
	}
	clk.Advance(30 * time.Second)
	if s := r.Sample(); !s.Vented || math.Abs(s.Source) > 1e-9 {
		t.Fatalf("after the vent coil: %+v", s)
	}
	if vented, err := c.ReadCoil(CoilVent); err != nil || !vented {
		t.Fatalf("vent coil reads %v, %v", vented, err)
	}
	if err := c.WriteRegister(RegVent, 7); !errors.Is(err, modbus.ErrIllegalDataValue) {
		t.Fatalf("vent register value 7: %v", err)
	}
}

// The RTU slave on the pseudo-terminal answers the library's RTU client.
func TestRTUOnPTY(t *testing.T) {
	_, _, ep, want := steadyRig(t)
	c := modbusClient(t, "rtu://"+ep.RTU, 500*time.Millisecond)
	if err := c.SetUnitId(uint8(ep.UnitID)); err != nil {
		t.Fatal(err)
	}
	if got := readValue(t, c, modbus.HOLDING_REGISTER, RegDevice, "float32", "CDAB"); !near32(got, want.Device) {
		t.Errorf("device over RTU = %v, want %v", got, want.Device)
	}
	if got := readValue(t, c, modbus.INPUT_REGISTER, RegReference64, "float64", "ABCDEFGH"); got != want.Reference {
		t.Errorf("reference (float64) over RTU = %v, want %v", got, want.Reference)
	}
	// Another slave address on the same line gets no answer.
	if err := c.SetUnitId(9); err != nil {
		t.Fatal(err)
	}
	if _, err := c.ReadRegister(RegStatus, modbus.INPUT_REGISTER); !errors.Is(err, modbus.ErrRequestTimedOut) {
		t.Errorf("unit 9: %v, want a time-out", err)
	}
}

// lineQuery is the read command with its line end, as a driver sends it.
const lineQuery = CmdRead + "\r\n"

// openLine opens a line instrument's device through go.bug.st/serial.
func openLine(t *testing.T, path string) (serial.Port, *bufio.Reader) {
	t.Helper()
	p, err := serial.Open(path, &serial.Mode{BaudRate: 9600})
	if err != nil {
		t.Fatalf("open %s: %v", path, err)
	}
	t.Cleanup(func() { p.Close() })
	if err := p.SetReadTimeout(time.Second); err != nil {
		t.Fatal(err)
	}
	return p, bufio.NewReader(p)
}

// ask sends a command and returns the reply line without its terminator.
func ask(t *testing.T, p serial.Port, rd *bufio.Reader, cmd string) (string, error) {
	t.Helper()
	if _, err := p.Write([]byte(cmd)); err != nil {
		t.Fatal(err)
	}
	line, err := rd.ReadString('\n')
	if err != nil {
		return line, err
	}
	if !strings.HasSuffix(line, "\r\n") {
		t.Errorf("reply %q does not end with CR LF", line)
	}
	return strings.TrimRight(line, "\r\n"), nil
}

func TestLineInstruments(t *testing.T) {
	_, _, ep, want := steadyRig(t)
	for _, c := range []struct {
		path, unit string
		want       float64
		decimals   int
	}{
		{ep.ReferenceLine, "bar", want.Reference, 5}, // resolution 0.01 mbar
		{ep.DeviceLine, "bar", want.Device, 2},       // resolution 0.01 bar
	} {
		p, rd := openLine(t, c.path)
		line, err := ask(t, p, rd, lineQuery)
		if err != nil {
			t.Fatalf("%s: %v", c.path, err)
		}
		num, unit, ok := strings.Cut(line, " ")
		if !ok || unit != c.unit {
			t.Fatalf("%s: reply %q, want a number and %q", c.path, line, c.unit)
		}
		v, err := strconv.ParseFloat(num, 64)
		if err != nil || math.Abs(v-c.want) > math.Pow10(-c.decimals)/2 {
			t.Errorf("%s: %q, want %v", c.path, line, c.want)
		}
		if dot := strings.IndexByte(num, '.'); len(num)-dot-1 != c.decimals {
			t.Errorf("%s: %q shows %d decimals, want %d", c.path, num, len(num)-dot-1, c.decimals)
		}
		if id, err := ask(t, p, rd, "*idn?\n"); err != nil || !strings.HasPrefix(id, "plateau,simulated") {
			t.Errorf("identification %q, %v", id, err)
		}
		if e, _ := ask(t, p, rd, "FOO\r"); !strings.HasPrefix(e, "ERR") {
			t.Errorf("unknown command answered %q", e)
		}
	}
}

// Resolve turns sim links into real ones; each resolved instrument's
// register and order read the value the rig says it serves.
func TestResolve(t *testing.T) {
	r, _, ep, want := steadyRig(t)
	cases := []struct {
		part, via, kind, addr string
		want                  float64
	}{
		{PartReference, "", config.LinkModbusTCP, ep.TCP, want.Reference},
		{PartDevice, config.LinkModbusRTU, config.LinkModbusRTU, ep.RTU, want.Device},
		{PartSource, config.LinkModbusTCP, config.LinkModbusTCP, ep.TCP, want.Source},
		{PartDevice, config.LinkSerial, config.LinkSerial, ep.DeviceLine, math.NaN()},
	}
	for _, c := range cases {
		in, err := r.Resolve(config.Instrument{Name: c.part, Role: c.part, Link: config.Link{Kind: config.LinkSim, Timeout: time.Second}, SimPart: c.part, SimVia: c.via})
		if err != nil {
			t.Fatal(err)
		}
		if in.Link.Kind != c.kind || in.Link.Address != c.addr || in.Link.Timeout != time.Second || in.SimPart != "" {
			t.Fatalf("%s via %q resolved to %+v", c.part, c.via, in.Link)
		}
		if math.IsNaN(c.want) {
			if in.Line.Query != CmdRead {
				t.Errorf("serial link without the line query: %+v", in.Line)
			}
			continue
		}
		cl := modbusClient(t, map[string]string{config.LinkModbusTCP: "tcp://", config.LinkModbusRTU: "rtu://"}[in.Link.Kind]+in.Link.Address, time.Second)
		table := map[string]modbus.RegType{"input": modbus.INPUT_REGISTER, "holding": modbus.HOLDING_REGISTER}[in.Value.Table]
		got := readValue(t, cl, table, uint16(in.Value.Register), in.Value.Type, in.Value.WordOrder) * in.Value.Scale
		if !near32(got, c.want) {
			t.Errorf("%s via %s: %v, want %v", c.part, c.via, got, c.want)
		}
		cl.Close()
	}
	if in, err := r.Resolve(config.Instrument{Name: "x", Link: config.Link{Kind: config.LinkSim}, SimPart: PartSource, SimVia: config.LinkSerial}); err == nil {
		t.Errorf("source over a line instrument resolved to %+v", in.Link)
	}
	if _, err := r.Resolve(config.Instrument{Name: "x", Link: config.Link{Kind: config.LinkSim}, SimPart: "barometer"}); err == nil {
		t.Error("an unknown part resolved")
	}
}

// The printed configuration is accepted by the config package, and its
// instruments point at this rig.
func TestConfigYAMLLoads(t *testing.T) {
	r, _, ep, _ := steadyRig(t)
	text, err := r.ConfigYAML()
	if err != nil {
		t.Fatal(err)
	}
	cfg, err := config.Parse([]byte(text), "sim.yaml")
	if err != nil {
		t.Fatalf("generated config rejected:\n%v\n---\n%s", err, text)
	}
	if len(cfg.Instruments) != 3 {
		t.Fatalf("%d instruments, want 3", len(cfg.Instruments))
	}
	byRole := map[string]config.Instrument{}
	for _, in := range cfg.Instruments {
		byRole[in.Role] = in
	}
	if a := byRole[config.RoleReference].Link.Address; a != ep.TCP {
		t.Errorf("reference address %q, want %q", a, ep.TCP)
	}
	if a := byRole[config.RoleDevice].Link.Address; a != ep.RTU {
		t.Errorf("device address %q, want %q", a, ep.RTU)
	}
	src := byRole[config.RoleSource].Set
	if src.VentCoil == nil || *src.VentCoil != CoilVent || src.ReachedInput == nil || src.Setpoint.Register != RegSetpoint {
		t.Errorf("source control %+v", src)
	}
}

// Ending the context (or Stop) closes every transport: the TCP port refuses
// and the pseudo-terminals are gone.
func TestStopClosesTransports(t *testing.T) {
	r, _ := newTestRig(t, quiet())
	ctx, cancel := context.WithCancel(context.Background())
	ep, err := r.Start(ctx)
	if err != nil {
		t.Fatal(err)
	}
	cancel()
	r.Stop()
	c, err := modbus.NewClient(&modbus.ClientConfiguration{URL: "tcp://" + ep.TCP, Timeout: 200 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	if err := c.Open(); err == nil {
		c.Close()
		t.Error("TCP server still accepts after Stop")
	}
	for _, path := range []string{ep.RTU, ep.ReferenceLine, ep.DeviceLine} {
		if p, err := serial.Open(path, &serial.Mode{BaudRate: 9600}); err == nil {
			p.Close()
			t.Errorf("%s still opens after Stop", path)
		}
	}
}
