package modbus

import (
	"errors"
	"math"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"plateau/config"
	"plateau/drivers"
)

// The values the libmodbus peer serves (testdata/peer.c). 123.456f decodes to
// 123.45600128173828 (REFERENCES.md §9.2 [X]).
var peerValues = []struct {
	name      string
	reg       int
	typ, ord  string
	want      float64
	wantWords string
}{
	{"int16", 0, "int16", "", -12345, "CFC7"},
	{"uint16", 1, "uint16", "", 54321, "D431"},
	{"int32", 2, "int32", "ABCD", -123456789, "F8A4 32EB"},
	{"uint32", 4, "uint32", "ABCD", 3000000000, "B2D0 5E00"},
	{"float32 ABCD", 10, "float32", "ABCD", 123.45600128173828, "42F6 E979"},
	{"float32 BADC", 12, "float32", "BADC", 123.45600128173828, "F642 79E9"},
	{"float32 CDAB", 14, "float32", "CDAB", 123.45600128173828, "E979 42F6"},
	{"float32 DCBA", 16, "float32", "DCBA", 123.45600128173828, "79E9 F642"},
	{"float64 ABCDEFGH", 20, "float64", "ABCDEFGH", -101325.0625, "C0F8 BCD1 0000 0000"},
}

func TestReadEveryTypeFromLibmodbusTCP(t *testing.T) {
	port, _ := startTCPPeer(t, 0)
	addr := "127.0.0.1:" + strconv.Itoa(port)
	for _, table := range []string{"holding", "input"} {
		for _, c := range peerValues {
			t.Run(table+"/"+c.name, func(t *testing.T) {
				g := mustOpen(t, inst("ref", config.LinkModbusTCP, addr,
					config.ValueRead{Table: table, Register: c.reg, Type: c.typ, WordOrder: c.ord, Scale: 1}))
				r, err := g.Read(ctxT(t))
				if err != nil {
					t.Fatal(err)
				}
				if r.Raw != c.want || r.Wire != c.wantWords {
					t.Errorf("got %.17g (%s), want %.17g (%s)", r.Raw, r.Wire, c.want, c.wantWords)
				}
				if r.RawUnit != "bar" || r.Pa != c.want*1e5 {
					t.Errorf("Pa = %g %s, want %g", r.Pa, r.RawUnit, c.want*1e5)
				}
			})
		}
	}
}

// mbpoll, a client we did not write, confirms the peer's float layout, so
// the table above does not rest on our own reading of peer.c alone.
func TestPeerLayoutAgreesWithMbpoll(t *testing.T) {
	mbpoll := needTool(t, "mbpoll")
	port, _ := startTCPPeer(t, 0)
	for _, c := range []struct {
		reg   string
		flags []string
	}{{"10", []string{"-B"}}, {"14", nil}} { // -B: ABCD; mbpoll's default is CDAB
		args := append([]string{"-m", "tcp", "-p", strconv.Itoa(port), "-0", "-1", "-t", "4:float", "-r", c.reg}, c.flags...)
		out, err := exec.Command(mbpoll, append(args, "127.0.0.1")...).CombinedOutput()
		if err != nil {
			t.Fatalf("mbpoll: %v\n%s", err, out)
		}
		if !strings.Contains(string(out), "["+c.reg+"]: \t123.456") {
			t.Errorf("mbpoll register %s: %s", c.reg, out)
		}
	}
}

func TestScaleAndCurrentLoop(t *testing.T) {
	port, _ := startTCPPeer(t, 0)
	addr := "127.0.0.1:" + strconv.Itoa(port)

	// uint16 counts of 0.01 kPa: 54321 → 543.21 kPa.
	in := inst("dut", config.LinkModbusTCP, addr, config.ValueRead{Register: 1, Type: "uint16", Scale: 0.01})
	in.Unit = "kPa"
	r, err := mustOpen(t, in).Read(ctxT(t))
	if err != nil || math.Abs(r.Pa-543210) > 1e-6 {
		t.Errorf("scaled uint16: %+v %v", r, err)
	}

	// 12 mA on a 0–10 bar loop is 5 bar (REFERENCES.md §7 test vector).
	in = inst("tx", config.LinkModbusTCP, addr, config.ValueRead{Register: 24, Type: "float32"})
	in.Unit = "mA"
	in.Loop = config.CurrentLoop{Enabled: true, Lower: "0 bar", Upper: "10 bar"}
	r, err = mustOpen(t, in).Read(ctxT(t))
	if err != nil || math.Abs(r.Pa-5e5) > 1e-6 || r.Raw != 12 || r.RawUnit != "mA" {
		t.Errorf("loop 12 mA: %+v %v", r, err)
	}

	// 2 mA is a NAMUR NE 43 failure signal: an error, never a pressure.
	in.Value.Register = 26
	_, err = mustOpen(t, in).Read(ctxT(t))
	if !errors.Is(err, drivers.ErrOutOfRange) {
		t.Errorf("loop 2 mA: err = %v, want out of range", err)
	}
}

func TestExceptionReplyIsBadReply(t *testing.T) {
	port, _ := startTCPPeer(t, 0)
	// Register 150 is beyond the peer's map: libmodbus answers "illegal data address".
	g := mustOpen(t, inst("ref", config.LinkModbusTCP, "127.0.0.1:"+strconv.Itoa(port),
		config.ValueRead{Register: 150, Type: "uint16"}))
	_, err := g.Read(ctxT(t))
	if !errors.Is(err, drivers.ErrBadReply) || !strings.Contains(err.Error(), "illegal data address") {
		t.Errorf("err = %v, want bad reply: illegal data address", err)
	}
	// The link stays usable after an exception.
	g2 := mustOpen(t, inst("ref2", config.LinkModbusTCP, "127.0.0.1:"+strconv.Itoa(port),
		config.ValueRead{Register: 1, Type: "uint16"}))
	if _, err := g2.Read(ctxT(t)); err != nil {
		t.Errorf("read after exception: %v", err)
	}
}

func TestSlowPeerTimesOut(t *testing.T) {
	port, _ := startTCPPeer(t, 300) // answers after 300 ms
	in := inst("ref", config.LinkModbusTCP, "127.0.0.1:"+strconv.Itoa(port), config.ValueRead{Register: 1, Type: "uint16"})
	in.Link.Timeout = 100 * time.Millisecond
	in.Link.Retries = 0
	g := mustOpen(t, in)
	start := time.Now()
	_, err := g.Read(ctxT(t))
	if !errors.Is(err, drivers.ErrTimeout) {
		t.Fatalf("err = %v, want timeout", err)
	}
	if d := time.Since(start); d > 250*time.Millisecond {
		t.Errorf("time-out took %s with a 100 ms limit", d)
	}
	// A client with a longer time-out (a separate link: "localhost" is
	// another URL) gets the answer from the same slow peer, which serves one
	// connection at a time.
	g.Close()
	patient := inst("ref2", config.LinkModbusTCP, "localhost:"+strconv.Itoa(port), config.ValueRead{Register: 1, Type: "uint16"})
	patient.Link.Timeout = 2 * time.Second // the peer first finishes the 300 ms of the abandoned request
	r, err := mustOpen(t, patient).Read(ctxT(t))
	if err != nil || r.Raw != 54321 {
		t.Errorf("patient read: %v %v", r.Raw, err)
	}
}

func TestRecoversAfterPeerRestart(t *testing.T) {
	bin := peerBinary(t)
	port, p := startTCPPeer(t, 0)
	g := mustOpen(t, inst("ref", config.LinkModbusTCP, "127.0.0.1:"+strconv.Itoa(port),
		config.ValueRead{Register: 10, Type: "float32"}))
	ctx := ctxT(t)
	if _, err := g.Read(ctx); err != nil {
		t.Fatal(err)
	}
	p.stop()
	_, err := g.Read(ctx)
	if !errors.Is(err, drivers.ErrLinkDown) {
		t.Fatalf("read with peer gone: %v, want link down", err)
	}
	if _, err := startProc(t, bin, "tcp", strconv.Itoa(port), "0"); err != nil {
		t.Fatal(err) // the port was ours a moment ago; a clash here is very unlikely
	}
	// Back-off starts at 100 ms and doubles; polling at 50 ms must see the
	// peer again well within a second.
	start := time.Now()
	for {
		r, err := g.Read(ctx)
		if err == nil {
			if r.Raw != 123.45600128173828 {
				t.Fatalf("after restart: %v", r.Raw)
			}
			break
		}
		if !errors.Is(err, drivers.ErrLinkDown) {
			t.Fatalf("while the peer restarts: %v", err)
		}
		if time.Since(start) > 2*time.Second {
			t.Fatalf("no recovery in 2 s: %v", err)
		}
		time.Sleep(50 * time.Millisecond)
	}
	t.Logf("recovered %s after restart", time.Since(start).Round(time.Millisecond))
}

func TestSourceWritesAndMbpollReadsBack(t *testing.T) {
	mbpoll := needTool(t, "mbpoll")
	port, _ := startTCPPeer(t, 0)
	in := inst("ctl", config.LinkModbusTCP, "127.0.0.1:"+strconv.Itoa(port), config.ValueRead{})
	in.Role = config.RoleSource
	coil, reached := 3, 2
	in.Set = config.SourceControl{Setpoint: complete(config.ValueRead{Register: 30, Type: "float32", WordOrder: "ABCD"}),
		VentCoil: &coil, ReachedInput: &reached}
	s, err := drivers.OpenSource(in, drivers.OpenEnv{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	ctx := ctxT(t)
	if err := s.SetPoint(ctx, 6.25e5); err != nil { // 6.25 bar
		t.Fatal(err)
	}
	if err := s.Vent(ctx); err != nil {
		t.Fatal(err)
	}
	ok, err := s.(drivers.Reacher).Reached(ctx)
	if err != nil || !ok {
		t.Errorf("Reached = %v, %v", ok, err)
	}
	// The libmodbus peer serves one connection at a time: let go of ours.
	s.Close()
	p := strconv.Itoa(port)
	out, err := exec.Command(mbpoll, "-m", "tcp", "-p", p, "-0", "-1", "-t", "4:float", "-B", "-r", "30", "127.0.0.1").CombinedOutput()
	if err != nil || !strings.Contains(string(out), "[30]: \t6.25") {
		t.Errorf("mbpoll setpoint: %v\n%s", err, out)
	}
	out, err = exec.Command(mbpoll, "-m", "tcp", "-p", p, "-0", "-1", "-t", "0", "-r", "3", "127.0.0.1").CombinedOutput()
	if err != nil || !strings.Contains(string(out), "[3]: \t1") {
		t.Errorf("mbpoll vent coil: %v\n%s", err, out)
	}
	// A setpoint an int16 register cannot hold is refused before anything is sent.
	in.Set.Setpoint = complete(config.ValueRead{Register: 32, Type: "int16", Scale: 0.001})
	s2, err := drivers.OpenSource(in, drivers.OpenEnv{})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	if err := s2.SetPoint(ctx, 40e5); err == nil { // 40 bar = 40000 counts > 32767
		t.Error("out-of-range setpoint accepted")
	}
}

func TestRTUOverPtyFromLibmodbus(t *testing.T) {
	bin := peerBinary(t)
	a, b := ptyPair(t)
	if _, err := startProc(t, bin, "rtu", a, "0"); err != nil {
		t.Fatal(err)
	}
	// Two instruments on one port share one client and one goroutine; read
	// them concurrently to prove the requests are serialised.
	var wg sync.WaitGroup
	for _, c := range []struct {
		reg  int
		typ  string
		ord  string
		want float64
	}{{10, "float32", "ABCD", 123.45600128173828}, {14, "float32", "CDAB", 123.45600128173828}, {2, "int32", "", -123456789}} {
		in := inst("g"+strconv.Itoa(c.reg), config.LinkModbusRTU, b, config.ValueRead{Register: c.reg, Type: c.typ, WordOrder: c.ord})
		in.Link.Pause = 2 * time.Millisecond
		g := mustOpen(t, in)
		wg.Add(1)
		go func() {
			defer wg.Done()
			for range 5 {
				r, err := g.Read(ctxT(t))
				if err != nil || r.Raw != c.want {
					t.Errorf("register %d: %v %v", c.reg, r.Raw, err)
					return
				}
			}
		}()
	}
	wg.Wait()
	if n := links.Users("rtu://" + b); n != 3 {
		t.Errorf("users of the shared port = %d, want 3", n)
	}
}

func TestRTUOverTCPGateway(t *testing.T) {
	bin := peerBinary(t)
	socat := needTool(t, "socat")
	// socat plays a serial gateway: it makes a pty (first address, opened
	// first), where the libmodbus RTU server listens, and relays RTU frames
	// between it and one TCP connection.
	dev := t.TempDir() + "/gw"
	port := freePort(t)
	gw := exec.Command(socat, "pty,raw,echo=0,link="+dev, "TCP-LISTEN:"+strconv.Itoa(port)+",bind=127.0.0.1,reuseaddr")
	if err := gw.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = gw.Process.Kill(); _ = gw.Wait() })
	waitFor(t, func() bool { _, err := os.Stat(dev); return err == nil })
	if _, err := startProc(t, bin, "rtu", dev, "0"); err != nil {
		t.Fatal(err)
	}
	in := inst("gw", config.LinkModbusRTUTCP, "127.0.0.1:"+strconv.Itoa(port), config.ValueRead{Register: 16, Type: "float32", WordOrder: "DCBA"})
	g := mustOpen(t, in)
	var r drivers.Reading
	var err error
	waitFor(t, func() bool { r, err = g.Read(ctxT(t)); return err == nil }) // socat may still be binding
	if r.Raw != 123.45600128173828 || r.Wire != "79E9 F642" {
		t.Errorf("got %v %q", r.Raw, r.Wire)
	}
}
