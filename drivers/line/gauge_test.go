package line

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/creack/pty"
	"golang.org/x/term"

	"plateau/config"
	"plateau/drivers"
)

// instrumentPty makes a pseudo-terminal pair: the test writes and reads the
// instrument's side (master), the gauge opens the slave by name.
func instrumentPty(t *testing.T) (*os.File, string) {
	t.Helper()
	master, slave, err := pty.Open()
	if err != nil {
		t.Skipf("no pseudo-terminals here: %v", err)
	}
	// Raw from the start, so bytes written before the gauge opens the port
	// are not echoed back as if the gauge had sent them.
	if _, err := term.MakeRaw(int(slave.Fd())); err != nil {
		t.Fatal(err)
	}
	name := slave.Name()
	t.Cleanup(func() { master.Close(); slave.Close() })
	return master, name
}

func openLine(t *testing.T, dev string, lp config.LineProtocol) drivers.Gauge {
	t.Helper()
	if lp.Terminator == "" {
		lp.Terminator = "\r\n"
	}
	if lp.Overload == nil {
		lp.Overload = common
	}
	in := config.Instrument{Name: "dut", Unit: "bar", Line: lp,
		Link: config.Link{Kind: config.LinkSerial, Address: dev, Baud: 9600, DataBits: 8, Parity: "none", StopBits: 1,
			Timeout: 300 * time.Millisecond, Backoff: 50 * time.Millisecond}}
	g, err := drivers.OpenGauge(in, drivers.OpenEnv{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { g.Close() })
	return g
}

// answer plays a query/response instrument: for every query line it writes
// the next reply.
func answer(t *testing.T, master *os.File, query string, replies ...string) {
	go func() {
		buf := make([]byte, 64)
		for _, r := range replies {
			got := ""
			for !strings.Contains(got, "\r\n") {
				n, err := master.Read(buf)
				if err != nil {
					return
				}
				got += string(buf[:n])
			}
			if strings.TrimSpace(got) != query {
				t.Errorf("instrument got query %q, want %q", got, query)
			}
			if _, err := master.Write([]byte(r)); err != nil {
				return
			}
		}
	}()
}

func TestQueryResponse(t *testing.T) {
	master, dev := instrumentPty(t)
	g := openLine(t, dev, config.LineProtocol{Query: "PR?", Terminator: "\r\n"})
	// Stale bytes before the first query must be flushed, not read as the reply.
	master.Write([]byte("9.99999 bar\r\n"))
	time.Sleep(20 * time.Millisecond)
	answer(t, master, "PR?",
		"+1.00012 bar\r\n",     // good
		"\x13\xfe#1.0?3\r\n",   // garbage on the line
		"OL\r\n",               // overload
		"P1: -2.5E-01 bar\r\n", // label, sign, exponent
		"14.5 psi\r\n",         // the front panel was switched to psi
		"+1.00",                // half a line, then silence
	)
	ctx := context.Background()
	checks := []struct {
		want float64
		err  error
	}{{1.00012, nil}, {0, drivers.ErrBadReply}, {0, drivers.ErrOverload}, {-0.25, nil}, {0, drivers.ErrBadReply}, {0, drivers.ErrTimeout}}
	for i, c := range checks {
		r, err := g.Read(ctx)
		if c.err != nil {
			if !errors.Is(err, c.err) {
				t.Errorf("read %d: %v, %v; want %v", i, r.Raw, err, c.err)
			}
			continue
		}
		if err != nil || r.Raw != c.want || r.Pa != c.want*1e5 || r.Wire == "" {
			t.Errorf("read %d: %+v, %v; want %v", i, r, err, c.want)
		}
	}
}

func TestTimeoutIsKept(t *testing.T) {
	_, dev := instrumentPty(t)
	g := openLine(t, dev, config.LineProtocol{Query: "PR?"})
	start := time.Now()
	_, err := g.Read(context.Background())
	if !errors.Is(err, drivers.ErrTimeout) {
		t.Fatalf("err = %v, want timeout", err)
	}
	if d := time.Since(start); d < 250*time.Millisecond || d > 600*time.Millisecond {
		t.Errorf("time-out after %s, configured 300 ms", d)
	}
}

// A streaming instrument sends lines all the time, and the driver may look
// at any moment, even mid-line: it must return a whole, fresh line.
func TestStreamingNewestCompleteLine(t *testing.T) {
	master, dev := instrumentPty(t)
	g := openLine(t, dev, config.LineProtocol{Terminator: "\r\n"})
	stop := make(chan struct{})
	defer close(stop)
	sent := make(chan int, 1000)
	go func() {
		for i := 1000; ; i++ {
			s := fmt.Sprintf("+%d.%03d bar\r\n", i, i%1000)
			// Split each line so reads often land between the halves.
			if _, err := master.Write([]byte(s[:4])); err != nil {
				return
			}
			time.Sleep(2 * time.Millisecond)
			if _, err := master.Write([]byte(s[4:])); err != nil {
				return
			}
			sent <- i
			select {
			case <-stop:
				return
			case <-time.After(3 * time.Millisecond):
			}
		}
	}()
	time.Sleep(50 * time.Millisecond) // let a backlog build up
	last := 0
	for range 20 {
		drain := 0
		for len(sent) > 0 {
			drain = <-sent
		}
		r, err := g.Read(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		i := int(r.Raw)
		if r.Raw != float64(i)+float64(i%1000)/1000 {
			t.Fatalf("half or mixed line: %v (%q)", r.Raw, r.Wire)
		}
		if i <= drain || i <= last {
			t.Fatalf("stale line %d: %d had been sent before the read, previous read %d", i, drain, last)
		}
		last = i
	}
}

// The port vanishes (adapter unplugged: socat goes away with its link) and
// comes back under the same name; the gauge reopens it by itself.
func TestReopenAfterPortVanished(t *testing.T) {
	socat, err := exec.LookPath("socat")
	if err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatal("CI: socat is required")
		}
		t.Skip("socat not installed")
	}
	dir := t.TempDir()
	dev := filepath.Join(dir, "dut")
	start := func() *exec.Cmd {
		// The instrument side answers every line with a fixed reading.
		cmd := exec.Command(socat, "pty,raw,echo=0,link="+dev, "SYSTEM:'while read q; do printf \"+2.5 bar\\r\\n\"; done',pty,raw,echo=0")
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		for deadline := time.Now().Add(3 * time.Second); time.Now().Before(deadline); time.Sleep(10 * time.Millisecond) {
			if _, err := os.Stat(dev); err == nil {
				return cmd
			}
		}
		t.Fatal("socat link did not appear")
		return nil
	}
	cmd := start()
	g := openLine(t, dev, config.LineProtocol{Query: "PR?", Terminator: "\r\n"})
	ctx := context.Background()
	if r, err := g.Read(ctx); err != nil || r.Raw != 2.5 {
		t.Fatalf("first read: %v %v", r.Raw, err)
	}
	cmd.Process.Kill()
	cmd.Wait()
	if _, err := g.Read(ctx); err == nil {
		t.Fatal("read succeeded with the port gone")
	}
	cmd = start()
	defer func() { cmd.Process.Kill(); cmd.Wait() }()
	var r drivers.Reading
	for i := 0; ; i++ {
		if r, err = g.Read(ctx); err == nil {
			break
		}
		if i > 40 {
			t.Fatalf("no recovery: %v", err)
		}
		time.Sleep(25 * time.Millisecond)
	}
	if r.Raw != 2.5 {
		t.Errorf("after reopen: %v", r.Raw)
	}
}
