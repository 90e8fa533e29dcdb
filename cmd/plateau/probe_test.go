package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/creack/pty"
	"golang.org/x/term"
)

// probe against a line instrument played by the test on a pseudo-terminal:
// three good replies, one overload, one garbled line.
func TestProbeLineInstrument(t *testing.T) {
	master, slave, err := pty.Open()
	if err != nil {
		t.Skipf("no pseudo-terminals: %v", err)
	}
	defer master.Close()
	defer slave.Close()
	if _, err := term.MakeRaw(int(slave.Fd())); err != nil {
		t.Fatal(err)
	}
	go func() {
		buf := make([]byte, 64)
		for _, reply := range []string{"+1.0000 bar", "+1.0002 bar", "OL", "1.0#01", "+1.0004 bar"} {
			if _, err := master.Read(buf); err != nil {
				return
			}
			master.Write([]byte(reply + "\r\n"))
		}
	}()
	base, err := os.ReadFile("../../testdata/config/sim.yaml")
	if err != nil {
		t.Skipf("example config not available: %v", err)
	}
	cfg := strings.Replace(string(base), "    link: {kind: sim}\n    sim_part: reference\n    sim_via: modbus-tcp\n",
		"    link: {kind: serial, address: "+slave.Name()+", timeout: 300ms}\n    unit: bar\n    line: {query: \"R?\"}\n", 1)
	cfg = strings.Replace(cfg, "  id: SIM-REF\n", "  id: SIM-REF\n  resolution: 0.0001 bar\n", 1)
	path := filepath.Join(t.TempDir(), "probe.yaml")
	if err := os.WriteFile(path, []byte(cfg), 0o600); err != nil {
		t.Fatal(err)
	}
	root := newRoot()
	var out bytes.Buffer
	root.SetOut(&out)
	root.SetErr(&out)
	root.SetArgs([]string{"--config", path, "probe", "ref", "-n", "5", "-i", "1ms"})
	if err := root.Execute(); err != nil {
		t.Fatalf("%v\n%s", err, out.String())
	}
	for _, want := range []string{"1.0002 bar", "3 of 5 reads good", "mean 1.00020 bar, standard deviation 0.00020 bar",
		"failed (overload): 1", "failed (bad_reply): 1"} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("missing %q in\n%s", want, out.String())
		}
	}
}
