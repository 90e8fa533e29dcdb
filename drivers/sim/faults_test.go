package sim

import (
	"errors"
	"math"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/simonvetter/modbus"
	"go.bug.st/serial"

	"plateau/config"
)

func faultyRig(t *testing.T, f config.SimFaults, opts ...Option) (*Rig, Endpoints, Sample) {
	s := WithDefaults(config.Simulator{Seed: 5})
	s.Faults = f
	r, clk, ep := startRig(t, s, opts...)
	return r, ep, settleAt(t, r, clk, 6.4e5)
}

func TestFaultDroppedReplies(t *testing.T) {
	_, ep, _ := faultyRig(t, config.SimFaults{Drop: 1}, WithDropHold(300*time.Millisecond))
	rtu := modbusClient(t, "rtu://"+ep.RTU, 200*time.Millisecond)
	if _, err := rtu.ReadRegister(RegStatus, modbus.INPUT_REGISTER); !errors.Is(err, modbus.ErrRequestTimedOut) {
		t.Errorf("RTU with every reply dropped: %v, want a time-out", err)
	}
	tcp := modbusClient(t, "tcp://"+ep.TCP, 100*time.Millisecond)
	if _, err := tcp.ReadRegister(RegStatus, modbus.INPUT_REGISTER); !errors.Is(err, modbus.ErrRequestTimedOut) {
		t.Errorf("TCP with every reply held back: %v, want a time-out", err)
	}
	p, _ := openLine(t, ep.ReferenceLine)
	expectSilence(t, p)
}

func TestFaultSlowReplies(t *testing.T) {
	_, ep, want := faultyRig(t, config.SimFaults{Slow: 1, SlowBy: 300 * time.Millisecond})
	rtu := modbusClient(t, "rtu://"+ep.RTU, 2*time.Second)
	start := time.Now()
	got := readValue(t, rtu, modbus.INPUT_REGISTER, RegReference, "float32", "ABCD")
	if el := time.Since(start); el < 300*time.Millisecond {
		t.Errorf("slow reply came after %v, want at least 300 ms", el)
	}
	if !near32(got, want.Reference) {
		t.Errorf("slow reply carried %v, want %v", got, want.Reference)
	}
	tcp := modbusClient(t, "tcp://"+ep.TCP, 100*time.Millisecond)
	if _, err := tcp.ReadRegister(RegStatus, modbus.INPUT_REGISTER); !errors.Is(err, modbus.ErrRequestTimedOut) {
		t.Errorf("TCP reply 300 ms late to a 100 ms client: %v, want a time-out", err)
	}
}

func TestFaultBadCRC(t *testing.T) {
	_, ep, _ := faultyRig(t, config.SimFaults{BadCRC: 1})
	rtu := modbusClient(t, "rtu://"+ep.RTU, 500*time.Millisecond)
	if _, err := rtu.ReadRegister(RegStatus, modbus.INPUT_REGISTER); !errors.Is(err, modbus.ErrBadCRC) {
		t.Errorf("RTU with corrupted CRC: %v, want bad crc", err)
	}
}

func TestFaultGarbageLines(t *testing.T) {
	_, ep, _ := faultyRig(t, config.SimFaults{Garbage: 1})
	p, rd := openLine(t, ep.DeviceLine)
	for range 3 {
		line, err := ask(t, p, rd, lineQuery)
		if err != nil {
			t.Fatal(err)
		}
		if line == "" || strings.ContainsAny(line, "0123456789") || strings.Contains(line, "bar") {
			t.Errorf("garbage line %q: want non-empty noise with no digit", line)
		}
	}
}

// expectSilence sends a query and checks that nothing comes back within
// 300 ms (go.bug.st/serial reports a read time-out as 0 bytes, no error).
func expectSilence(t *testing.T, p serial.Port) {
	t.Helper()
	if err := p.SetReadTimeout(300 * time.Millisecond); err != nil {
		t.Fatal(err)
	}
	defer p.SetReadTimeout(time.Second)
	if _, err := p.Write([]byte(lineQuery)); err != nil {
		t.Fatal(err)
	}
	buf := make([]byte, 64)
	if n, err := p.Read(buf); n != 0 || err != nil {
		t.Errorf("expected silence, got %q, %v", buf[:n], err)
	}
}

// eventually polls cond for up to two seconds of wall time.
func eventually(t *testing.T, what string, cond func() bool) {
	t.Helper()
	for deadline := time.Now().Add(2 * time.Second); time.Now().Before(deadline); time.Sleep(10 * time.Millisecond) {
		if cond() {
			return
		}
	}
	t.Fatalf("timed out waiting until %s", what)
}

// The link goes away for the last 2 s of every 10 s of clock time and comes
// back: TCP refuses connections, the serial instruments fall silent.
func TestFaultLinkDownAndUp(t *testing.T) {
	s := WithDefaults(config.Simulator{Seed: 5})
	s.Faults = config.SimFaults{LinkDown: 2 * time.Second, LinkEvery: 10 * time.Second}
	_, clk, ep := startRig(t, s)
	tcpRead := func() error {
		c, err := modbus.NewClient(&modbus.ClientConfiguration{URL: "tcp://" + ep.TCP, Timeout: 200 * time.Millisecond})
		if err != nil {
			return err
		}
		if err := c.Open(); err != nil {
			return err
		}
		defer c.Close()
		_, err = c.ReadRegister(RegStatus, modbus.INPUT_REGISTER)
		return err
	}
	if err := tcpRead(); err != nil {
		t.Fatalf("link up at start: %v", err)
	}
	// Move the clock only once the link supervisor waits on it.
	eventually(t, "the link supervisor waits", func() bool { return clk.Waiting() > 0 })
	clk.Advance(8 * time.Second)
	eventually(t, "the TCP server is away", func() bool { return tcpRead() != nil })
	rtu := modbusClient(t, "rtu://"+ep.RTU, 200*time.Millisecond)
	if _, err := rtu.ReadRegister(RegStatus, modbus.INPUT_REGISTER); !errors.Is(err, modbus.ErrRequestTimedOut) {
		t.Errorf("RTU during the outage: %v, want a time-out", err)
	}
	p, rd := openLine(t, ep.ReferenceLine)
	expectSilence(t, p)
	eventually(t, "the link supervisor waits again", func() bool { return clk.Waiting() > 0 })
	clk.Advance(2 * time.Second)
	eventually(t, "the TCP server is back", func() bool { return tcpRead() == nil })
	if _, err := rtu.ReadRegister(RegStatus, modbus.INPUT_REGISTER); err != nil {
		t.Errorf("RTU after the outage: %v", err)
	}
	if line, err := ask(t, p, rd, lineQuery); err != nil || !strings.HasSuffix(line, " bar") {
		t.Errorf("line instrument after the outage: %q, %v", line, err)
	}
}

// A stuck value repeats while the pressure moves, then comes unstuck.
func TestFaultStuckValue(t *testing.T) {
	s := WithDefaults(config.Simulator{Seed: 5})
	s.Faults = config.SimFaults{Stuck: 1, StuckFor: 10 * time.Second}
	r, clk, ep := startRig(t, s)
	c := modbusClient(t, "tcp://"+ep.TCP, time.Second)
	read := func() float64 { return readValue(t, c, modbus.INPUT_REGISTER, RegDevice, "float32", "CDAB") }
	first := read() // sticks here, vented at 0 bar
	if err := r.SetPoint(8e5); err != nil {
		t.Fatal(err)
	}
	clk.Advance(9 * time.Second)
	if got := read(); got != first {
		t.Fatalf("stuck value moved: %v then %v", first, got)
	}
	clk.Advance(2 * time.Second)
	if got := read(); math.Abs(got-8) > 0.2 {
		t.Fatalf("after the stuck period the device reads %v, want about 8 bar", got)
	}
}

// A spike throws one reply off by a fifth of the span.
func TestFaultSpike(t *testing.T) {
	_, ep, want := faultyRig(t, config.SimFaults{Spike: 1})
	c := modbusClient(t, "tcp://"+ep.TCP, time.Second)
	got := readValue(t, c, modbus.INPUT_REGISTER, RegDevice, "float32", "CDAB")
	if d := math.Abs(got - want.Device); math.Abs(d-3.2) > 1e-5 { // 20 % of a 16 bar span
		t.Errorf("spiked device value %v, model %v: off by %v, want 3.2 bar", got, want.Device, d)
	}
}

// Without faults, many reads in a row all succeed (the fault switches are
// really off by default).
func TestNoFaultsByDefault(t *testing.T) {
	_, ep, want := faultyRig(t, config.SimFaults{})
	c := modbusClient(t, "rtu://"+ep.RTU, 500*time.Millisecond)
	for i := range 20 {
		if got := readValue(t, c, modbus.INPUT_REGISTER, RegReference, "float32", "ABCD"); !near32(got, want.Reference) {
			t.Fatalf("read %d: %v, want %v", i, got, want.Reference)
		}
	}
	if os.Getenv("PLATEAU_SIM_VERBOSE") != "" {
		t.Log(MapText(ep.Registers))
	}
}

func TestSetFault(t *testing.T) {
	var f config.SimFaults
	for _, spec := range []string{"drop=0.1", "SLOW = 0.2", "slow_by=300ms", "bad_crc=0.05", "garbage=1", "stuck=0.01", "stuck_for=10s", "spike=0", "link_down=5s", "link_every=1m"} {
		if err := SetFault(&f, spec); err != nil {
			t.Errorf("%s: %v", spec, err)
		}
	}
	want := config.SimFaults{Drop: 0.1, Slow: 0.2, SlowBy: 300 * time.Millisecond, BadCRC: 0.05, Garbage: 1, Stuck: 0.01,
		StuckFor: 10 * time.Second, LinkDown: 5 * time.Second, LinkEvery: time.Minute}
	if f != want {
		t.Errorf("faults %+v, want %+v", f, want)
	}
	for _, bad := range []string{"drop", "drop=", "drop=1.5", "drop=-0.1", "slow_by=fast", "link_down=-1s", "smoke=0.1"} {
		if err := SetFault(&f, bad); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
}
