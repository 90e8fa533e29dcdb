package modbus

import (
	"bufio"
	"context"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"plateau/config"
	"plateau/drivers"
)

// Third-party peers: a libmodbus server compiled from testdata/peer.c,
// mbpoll as an independent client, socat for pseudo-terminal pairs. Tests
// that need them skip when they are missing, and fail under CI=true.

func needPeer(t testing.TB, what string) {
	t.Helper()
	if os.Getenv("CI") == "true" {
		t.Fatalf("CI: %s is required (apt-get install libmodbus-dev gcc mbpoll socat)", what)
	}
	t.Skipf("%s not available; install libmodbus-dev gcc mbpoll socat to run this test", what)
}

func needTool(t testing.TB, name string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err != nil {
		needPeer(t, name)
	}
	return p
}

var (
	peerOnce sync.Once
	peerBin  string
	peerErr  error
)

// peerBinary compiles the libmodbus peer once per test binary.
func peerBinary(t testing.TB) string {
	t.Helper()
	gcc := needTool(t, "gcc")
	if _, err := os.Stat("/usr/include/modbus/modbus.h"); err != nil {
		needPeer(t, "libmodbus-dev")
	}
	peerOnce.Do(func() {
		dir, err := os.MkdirTemp("", "plateau-peer")
		if err != nil {
			peerErr = err
			return
		}
		peerBin = filepath.Join(dir, "peer")
		out, err := exec.Command(gcc, "-O2", "-Wall", "-o", peerBin, "testdata/peer.c", "-lmodbus").CombinedOutput()
		if err != nil {
			peerErr = fmt.Errorf("compile peer: %v\n%s", err, out)
		}
	})
	if peerErr != nil {
		t.Fatal(peerErr)
	}
	return peerBin
}

// proc is a running peer process.
type proc struct {
	cmd  *exec.Cmd
	done chan struct{}
}

func (p *proc) stop() {
	_ = p.cmd.Process.Kill()
	<-p.done
}

// startProc runs a command and waits until it prints "ready".
func startProc(t testing.TB, name string, args ...string) (*proc, error) {
	t.Helper()
	cmd := exec.Command(name, args...)
	out, err := cmd.StdoutPipe()
	if err != nil {
		return nil, err
	}
	var stderr strings.Builder
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		return nil, err
	}
	p := &proc{cmd: cmd, done: make(chan struct{})}
	ready := make(chan bool, 1)
	go func() {
		sc := bufio.NewScanner(out)
		ok := sc.Scan() && sc.Text() == "ready"
		ready <- ok
		for sc.Scan() {
		}
		_ = cmd.Wait()
		close(p.done)
	}()
	select {
	case ok := <-ready:
		if !ok {
			<-p.done
			return nil, fmt.Errorf("%s %v did not start: %s", name, args, stderr.String())
		}
	case <-time.After(5 * time.Second):
		p.stop()
		return nil, fmt.Errorf("%s %v: no ready line in 5 s", name, args)
	}
	t.Cleanup(func() {
		select {
		case <-p.done:
		default:
			p.stop()
		}
	})
	return p, nil
}

// freePort reserves a loopback port and releases it for the peer to bind.
func freePort(t testing.TB) int {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port
}

// startTCPPeer starts the libmodbus TCP server on a free port, retrying when
// another process took the port between reservation and bind.
func startTCPPeer(t testing.TB, delayMS int) (int, *proc) {
	t.Helper()
	bin := peerBinary(t)
	var last error
	for range 5 {
		port := freePort(t)
		p, err := startProc(t, bin, "tcp", strconv.Itoa(port), strconv.Itoa(delayMS))
		if err == nil {
			return port, p
		}
		last = err
	}
	t.Fatal(last)
	return 0, nil
}

// ptyPair starts socat with two linked pseudo-terminals and returns their paths.
func ptyPair(t testing.TB) (string, string) {
	t.Helper()
	socat := needTool(t, "socat")
	dir := t.TempDir()
	a, b := filepath.Join(dir, "a"), filepath.Join(dir, "b")
	cmd := exec.Command(socat, "pty,raw,echo=0,link="+a, "pty,raw,echo=0,link="+b)
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = cmd.Process.Kill(); _ = cmd.Wait() })
	waitFor(t, func() bool { _, ea := os.Stat(a); _, eb := os.Stat(b); return ea == nil && eb == nil })
	return a, b
}

func waitFor(t testing.TB, ok func() bool) {
	t.Helper()
	for deadline := time.Now().Add(5 * time.Second); time.Now().Before(deadline); time.Sleep(10 * time.Millisecond) {
		if ok() {
			return
		}
	}
	t.Fatal("condition not met in 5 s")
}

// inst builds a Modbus instrument config with every option set, as the
// configuration supplies them: the driver adds no defaults of its own.
func inst(name, kind, addr string, v config.ValueRead) config.Instrument {
	return config.Instrument{
		Name: name, Role: config.RoleReference, Unit: "bar", Value: complete(v),
		Link: config.Link{Kind: kind, Address: addr, UnitID: 1, Baud: 19200, DataBits: 8, Parity: "none", StopBits: 1,
			Timeout: 500 * time.Millisecond, Retries: 1, Backoff: 100 * time.Millisecond},
	}
}

// complete fills what a test's value spec leaves out: holding registers,
// big-endian order, no scaling.
func complete(v config.ValueRead) config.ValueRead {
	if v.Table == "" {
		v.Table = "holding"
	}
	if v.WordOrder == "" {
		v.WordOrder = "ABCD" // "AB" for 16-bit types
	}
	if v.Scale == 0 {
		v.Scale = 1
	}
	return v
}

func mustOpen(t testing.TB, in config.Instrument) drivers.Gauge {
	t.Helper()
	g, err := drivers.OpenGauge(in, drivers.OpenEnv{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { g.Close() })
	return g
}

func ctxT(t testing.TB) context.Context {
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	t.Cleanup(cancel)
	return ctx
}
