package modbus

import (
	"io"
	"math"
	"strings"
	"testing"
	"time"

	mb "github.com/simonvetter/modbus"

	"plateau/config"
	"plateau/drivers"
)

// The driver adds no defaults: an option it cannot work without, left unset,
// is an error at open that names the option.
func TestUnsetOptionsAreErrorsAtOpen(t *testing.T) {
	rtu := func() config.Instrument {
		return inst("dut", config.LinkModbusRTU, "/dev/null", config.ValueRead{Register: 1, Type: "uint16"})
	}
	tcp := func() config.Instrument {
		return inst("ref", config.LinkModbusTCP, "127.0.0.1:1502", config.ValueRead{Register: 1, Type: "uint16"})
	}
	cases := []struct {
		name   string
		in     func() config.Instrument
		change func(*config.Instrument)
		key    string
	}{
		{"timeout", tcp, func(in *config.Instrument) { in.Link.Timeout = 0 }, "link.timeout"},
		{"unit id", tcp, func(in *config.Instrument) { in.Link.UnitID = 0 }, "link.unit_id"},
		{"table", tcp, func(in *config.Instrument) { in.Value.Table = "" }, "value.table"},
		{"type", tcp, func(in *config.Instrument) { in.Value.Type = "" }, "value type"},
		{"word order", tcp, func(in *config.Instrument) { in.Value.WordOrder = "" }, "word order"},
		{"scale", tcp, func(in *config.Instrument) { in.Value.Scale = 0 }, "scale"},
		{"unit", tcp, func(in *config.Instrument) { in.Unit = "" }, "unit"},
		{"baud", rtu, func(in *config.Instrument) { in.Link.Baud = 0 }, "link.baud"},
		{"data bits", rtu, func(in *config.Instrument) { in.Link.DataBits = 0 }, "link.data_bits"},
		{"parity", rtu, func(in *config.Instrument) { in.Link.Parity = "" }, "link.parity"},
		{"stop bits", rtu, func(in *config.Instrument) { in.Link.StopBits = 0 }, "link.stop_bits"},
		{"negative retries", tcp, func(in *config.Instrument) { in.Link.Retries = -1 }, "link.retries"},
		{"negative backoff", tcp, func(in *config.Instrument) { in.Link.Backoff = -time.Second }, "link.backoff"},
		{"NaN offset", tcp, func(in *config.Instrument) { in.Value.Offset = nan() }, "offset"},
		{"infinite scale", tcp, func(in *config.Instrument) { in.Value.Scale = inf() }, "scale"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			in := c.in()
			c.change(&in)
			g, err := drivers.OpenGauge(in, drivers.OpenEnv{})
			if err == nil {
				g.Close()
				t.Fatalf("opened without %s", c.key)
			}
			if !strings.Contains(err.Error(), c.key) {
				t.Errorf("error %q does not name %s", err, c.key)
			}
		})
	}
	// Serial settings mean nothing to TCP: not needed there.
	in := tcp()
	in.Link.Baud, in.Link.DataBits, in.Link.Parity, in.Link.StopBits = 0, 0, "", 0
	g, err := drivers.OpenGauge(in, drivers.OpenEnv{})
	if err != nil {
		t.Fatalf("TCP without serial settings: %v", err)
	}
	g.Close()
}

// Every problem of one link is reported at once, not one per attempt.
func TestLinkOptionsListEveryProblem(t *testing.T) {
	_, err := linkOptions(config.Link{Kind: config.LinkModbusRTU, Address: "/dev/ttyUSB0"})
	if err == nil {
		t.Fatal("empty RTU link accepted")
	}
	for _, key := range []string{"link.timeout", "link.parity", "link.baud", "link.data_bits", "link.stop_bits"} {
		if !strings.Contains(err.Error(), key) {
			t.Errorf("%q missing from %q", key, err)
		}
	}
}

// A source's setpoint spec is checked like a value spec, under its own key.
func TestSourceSetpointNeedsEveryOption(t *testing.T) {
	in := inst("ctl", config.LinkModbusTCP, "127.0.0.1:1502", config.ValueRead{})
	coil := 3
	in.Set = config.SourceControl{Setpoint: config.ValueRead{Table: "holding", Register: 30, Type: "float32", WordOrder: "ABCD"}, VentCoil: &coil}
	if _, err := drivers.OpenSource(in, drivers.OpenEnv{}); err == nil || !strings.Contains(err.Error(), "source.setpoint") {
		t.Errorf("setpoint without scale: %v", err)
	}
	in.Set.Setpoint.Scale, in.Set.Setpoint.Table = 1, ""
	if _, err := drivers.OpenSource(in, drivers.OpenEnv{}); err == nil || !strings.Contains(err.Error(), "source.setpoint.table") {
		t.Errorf("setpoint without table: %v", err)
	}
}

// Worked by hand from Modbus over Serial Line V1.02 §2.5.1 (11-bit
// characters): a read of 2 registers is 8 + 9 characters plus 2 × 3.5 of
// silence = 24 characters = 264 bits.
func TestLineReadsPerSecond(t *testing.T) {
	cases := []struct {
		baud, n int
		pause   time.Duration
		want    float64
	}{
		{19200, 2, 0, 19200.0 / 264},                                // 72.7 reads/s
		{9600, 2, 0, 9600.0 / 264},                                  // half the baud, half the reads
		{19200, 2, 20 * time.Millisecond, 1 / (225.5/19200 + 0.02)}, // 31.5 reads/s: the pause covers the second silence
		{19200, 1, 0, 19200.0 / 242},                                // one register: 2 characters fewer
		{0, 2, 0, 0},
	}
	for _, c := range cases {
		if got := LineReadsPerSecond(c.baud, c.n, c.pause); math.Abs(got-c.want) > 1e-9 {
			t.Errorf("LineReadsPerSecond(%d, %d, %s) = %g, want %g", c.baud, c.n, c.pause, got, c.want)
		}
	}
}

// Instruments on one connection share its settings: a second one that
// gives other settings is refused at open, naming what differs.
func TestSharedLinkSettingsMustAgree(t *testing.T) {
	a := inst("ref", config.LinkModbusTCP, "127.0.0.1:1502", config.ValueRead{Register: 1, Type: "uint16"})
	g, err := drivers.OpenGauge(a, drivers.OpenEnv{})
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	b := a
	b.Name, b.Link.UnitID = "dut", 2 // another unit on the same connection: fine
	g2, err := drivers.OpenGauge(b, drivers.OpenEnv{})
	if err != nil {
		t.Fatalf("same settings, other unit: %v", err)
	}
	g2.Close()
	b.Link.Timeout, b.Link.Pause = 2*time.Second, 5*time.Millisecond
	if g3, err := drivers.OpenGauge(b, drivers.OpenEnv{}); err == nil {
		g3.Close()
		t.Fatal("other settings on a shared connection accepted")
	} else if !strings.Contains(err.Error(), "link.timeout 500ms, not 2s") || !strings.Contains(err.Error(), "link.pause 0s, not 5ms") {
		t.Errorf("error %q does not name the differences", err)
	}
	if n := links.Users("tcp://127.0.0.1:1502"); n != 1 {
		t.Errorf("users after the refused open: %d, want 1", n)
	}
}

// A Modbus RTU link and a line instrument cannot share a serial device.
func TestRTULinkOwnsItsPort(t *testing.T) {
	dev, _ := startLine(t, 1)
	g, err := drivers.OpenGauge(inst("dut", config.LinkModbusRTU, dev, config.ValueRead{Register: 0, Type: "float32"}), drivers.OpenEnv{})
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	if _, err := drivers.ClaimPort(dev, "line instrument"); err == nil || !strings.Contains(err.Error(), "Modbus RTU link") {
		t.Errorf("claim of the link's port: %v", err)
	}
}

// A unit is benched after two unanswered requests in a row, for the back-off,
// doubling up to 30 s; any answer clears it, an exception too; a transport
// error says nothing about the unit; a vent is never refused; a unit alone
// on its link is never benched.
func TestUnitBenching(t *testing.T) {
	timeout := mb.ErrRequestTimedOut
	steps := []struct {
		err         error
		wantBenched bool
		wantBackoff time.Duration // the next one
	}{
		{timeout, false, 0},
		{mb.ErrIllegalDataAddress, false, 0}, // it answered
		{timeout, false, 0},
		{io.EOF, false, 0}, // the connection, not the unit
		{timeout, true, 2 * time.Second},
		{timeout, true, 4 * time.Second},
		{nil, false, 0},
		{timeout, false, 0},
	}
	u := &unitState{unit: 3}
	read := &op{code: opReadRegisters, unit: 3}
	vent := &op{code: opWriteCoil, urgent: true, unit: 3}
	for i, s := range steps {
		u.after(s.err, time.Second)
		err := u.benched(read, 8)
		if (err != nil) != s.wantBenched || u.backoff != s.wantBackoff {
			t.Errorf("step %d (%v): benched %v, next back-off %s; want %v, %s", i, s.err, err, u.backoff, s.wantBenched, s.wantBackoff)
		}
		if err != nil && drivers.KindOf(drivers.Fail("dut", kindOf(err), err)) != drivers.KindTimeout {
			t.Errorf("step %d: a benched read is kind %s, want timeout", i, kindOf(err))
		}
		if u.benched(vent, 8) != nil || u.benched(read, 1) != nil {
			t.Errorf("step %d: a vent, or a unit alone on its link, was refused", i)
		}
	}
	for range 10 {
		u.after(timeout, time.Second)
	}
	if u.backoff != maxBackoff {
		t.Errorf("back-off %s after many silences, want the cap %s", u.backoff, maxBackoff)
	}
}
