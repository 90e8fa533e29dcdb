package sim

import (
	"context"
	"math"
	"net"
	"os"
	"os/exec"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"
)

// needPeer finds a third-party program: a test skips without it, except in
// CI where its absence is a failure.
func needPeer(t *testing.T, path, pkg string, check ...string) string {
	t.Helper()
	p, err := exec.LookPath(path)
	if err == nil && len(check) > 0 {
		err = exec.Command(p, check...).Run()
	}
	if err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("%s is required in CI (Debian package %s): %v", path, pkg, err)
		}
		t.Skipf("%s not available (Debian package %s): %v", path, pkg, err)
	}
	return p
}

var mbpollValue = regexp.MustCompile(`(?m)^\[(\d+)\]:\s+(\S+)`)

// mbpoll runs the Debian mbpoll client once and returns the values it
// printed, by 1-based reference.
func mbpoll(t *testing.T, args ...string) map[int]float64 {
	t.Helper()
	bin := needPeer(t, "mbpoll", "mbpoll")
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	out, err := exec.CommandContext(ctx, bin, append([]string{"-1", "-o", "1"}, args...)...).CombinedOutput()
	if err != nil {
		t.Fatalf("mbpoll %v: %v\n%s", args, err, out)
	}
	vals := map[int]float64{}
	for _, m := range mbpollValue.FindAllStringSubmatch(string(out), -1) {
		ref, _ := strconv.Atoi(m[1])
		v, err := strconv.ParseFloat(m[2], 64)
		if err != nil {
			t.Fatalf("mbpoll printed %q: %v\n%s", m[0], err, out)
		}
		vals[ref] = v
	}
	if len(vals) == 0 {
		t.Fatalf("mbpoll printed no values:\n%s", out)
	}
	t.Logf("mbpoll %s → %v", strings.Join(args, " "), vals)
	return vals
}

// near6 compares with mbpoll's printed precision (six significant digits).
func near6(got, want float64) bool { return math.Abs(got-want) <= 1e-5*math.Max(1, math.Abs(want)) }

// A third-party Modbus master (mbpoll, libmodbus inside) reads the TCP
// server: the reference as big-endian float (-B) from the input table, the
// device as word-swapped float (mbpoll's default order) from the holding
// table, and the status word. mbpoll's -r counts from 1.
func TestMbpollReadsTCP(t *testing.T) {
	needPeer(t, "mbpoll", "mbpoll")
	_, _, ep, want := steadyRig(t)
	_, port, err := net.SplitHostPort(ep.TCP)
	if err != nil {
		t.Fatal(err)
	}
	host := "127.0.0.1"
	ref := mbpoll(t, "-m", "tcp", "-a", "1", "-p", port, "-t", "3:float", "-B", "-r", strconv.Itoa(RegReference+1), "-c", "1", host)
	if got := ref[RegReference+1]; !near6(got, want.Reference) {
		t.Errorf("mbpoll reference = %v, want %v", got, want.Reference)
	}
	dev := mbpoll(t, "-m", "tcp", "-a", "1", "-p", port, "-t", "4:float", "-r", strconv.Itoa(RegDevice+1), "-c", "1", host)
	if got := dev[RegDevice+1]; !near6(got, want.Device) {
		t.Errorf("mbpoll device = %v, want %v", got, want.Device)
	}
	st := mbpoll(t, "-m", "tcp", "-a", "1", "-p", port, "-t", "3", "-0", "-r", strconv.Itoa(RegStatus), "-c", "1", host)
	if got := st[RegStatus]; got != StatusReached {
		t.Errorf("mbpoll status = %v, want %d (reached)", got, StatusReached)
	}
}

// mbpoll as an RTU master on the pseudo-terminal, 19200 8E1 (its default).
func TestMbpollReadsRTU(t *testing.T) {
	needPeer(t, "mbpoll", "mbpoll")
	_, _, ep, want := steadyRig(t)
	ref := mbpoll(t, "-m", "rtu", "-a", strconv.Itoa(ep.UnitID), "-b", "19200", "-P", "even",
		"-t", "3:float", "-B", "-r", strconv.Itoa(RegReference+1), "-c", "1", ep.RTU)
	if got := ref[RegReference+1]; !near6(got, want.Reference) {
		t.Errorf("mbpoll over RTU: reference = %v, want %v", got, want.Reference)
	}
	dev := mbpoll(t, "-m", "rtu", "-a", strconv.Itoa(ep.UnitID), "-b", "19200", "-P", "even",
		"-t", "4:float", "-r", strconv.Itoa(RegDevice+1), "-c", "1", ep.RTU)
	if got := dev[RegDevice+1]; !near6(got, want.Device) {
		t.Errorf("mbpoll over RTU: device = %v, want %v", got, want.Device)
	}
}

// mbpoll writes the source setpoint over TCP (FC 16, big-endian float).
func TestMbpollWritesSetpoint(t *testing.T) {
	needPeer(t, "mbpoll", "mbpoll")
	r, clk, ep := startRig(t, quiet())
	_, port, _ := net.SplitHostPort(ep.TCP)
	bin := needPeer(t, "mbpoll", "mbpoll")
	out, err := exec.Command(bin, "-1", "-m", "tcp", "-a", "1", "-p", port, "-t", "4:float", "-B",
		"-r", strconv.Itoa(RegSetpoint+1), "127.0.0.1", "5.5").CombinedOutput()
	if err != nil {
		t.Fatalf("mbpoll write: %v\n%s", err, out)
	}
	clk.Advance(30 * time.Second)
	if got := r.Sample(); math.Abs(got.Setpoint-5.5) > 1e-9 || math.Abs(got.Source-5.5) > 1e-9 {
		t.Fatalf("after mbpoll wrote 5.5 bar: setpoint %v, source %v", got.Setpoint, got.Source)
	}
}

// pyserial (Debian's python3-serial, run by the system Python) reads
// well-formed lines from the line instruments.
const pyReadLine = `
import sys, serial
with serial.Serial(sys.argv[1], 9600, timeout=2) as s:
    s.write(b"READ?\r\n")
    sys.stdout.write(repr(s.readline()))
`

func TestPyserialReadsLines(t *testing.T) {
	py := needPeer(t, "/usr/bin/python3", "python3-serial", "-c", "import serial")
	_, _, ep, want := steadyRig(t)
	for _, c := range []struct {
		path string
		want float64
	}{{ep.ReferenceLine, want.Reference}, {ep.DeviceLine, want.Device}} {
		out, err := exec.Command(py, "-c", pyReadLine, c.path).CombinedOutput()
		if err != nil {
			t.Fatalf("pyserial on %s: %v\n%s", c.path, err, out)
		}
		// Python prints the bytes' repr: b'+6.40005 bar\r\n'
		line := strings.TrimSuffix(strings.TrimPrefix(string(out), "b'"), "'")
		if !strings.HasSuffix(line, `\r\n`) {
			t.Fatalf("pyserial got %s, want a line ending in CR LF", out)
		}
		fields := strings.Fields(strings.TrimSuffix(line, `\r\n`))
		if len(fields) != 2 || fields[1] != "bar" {
			t.Fatalf("pyserial got %s, want \"<number> bar\"", out)
		}
		v, err := strconv.ParseFloat(fields[0], 64)
		if err != nil || math.Abs(v-c.want) > 0.006 {
			t.Errorf("pyserial read %s, want %v", out, c.want)
		}
	}
}
