package sim

import (
	"reflect"
	"strings"
	"testing"
)

func TestSplitCommands(t *testing.T) {
	cases := []struct {
		in       string
		idle     bool
		cmds     []string
		leftover string
	}{
		{"READ?\r\n", false, []string{"READ?"}, ""},
		{"READ?\n*IDN?\r", false, []string{"READ?", "*IDN?"}, ""},
		{"READ", false, nil, "READ"},
		{"READ?", true, []string{"READ?"}, ""},
		{"\r\n\r\n  \n", false, nil, ""},
		{"READ?\r\nREA", false, []string{"READ?"}, "REA"},
	}
	for _, c := range cases {
		cmds, rest := splitCommands([]byte(c.in), c.idle)
		if !reflect.DeepEqual(cmds, c.cmds) || string(rest) != c.leftover {
			t.Errorf("splitCommands(%q, %v) = %q, %q; want %q, %q", c.in, c.idle, cmds, rest, c.cmds, c.leftover)
		}
	}
}

func TestDecimalsFor(t *testing.T) {
	for _, c := range []struct {
		step float64
		want int
	}{{0.01, 2}, {0.001, 3}, {1e-5, 5}, {0.05, 2}, {1, 0}, {10, 0}, {0, 6}, {1e-9, 6}} {
		if got := decimalsFor(c.step); got != c.want {
			t.Errorf("decimalsFor(%g) = %d, want %d", c.step, got, c.want)
		}
	}
}

// FuzzSplitCommands feeds arbitrary bytes from the serial line: no panic,
// commands never hold a line end, and nothing waits forever.
func FuzzSplitCommands(f *testing.F) {
	f.Add([]byte("READ?\r\n"), false)
	f.Add([]byte("\xff\x00READ?\rX"), true)
	f.Fuzz(func(t *testing.T, in []byte, idle bool) {
		cmds, rest := splitCommands(in, idle)
		for _, c := range cmds {
			if c == "" || strings.ContainsAny(c, "\r\n") {
				t.Fatalf("command %q", c)
			}
		}
		if len(rest) > maxPending || (idle && len(rest) > 0) || strings.ContainsAny(string(rest), "\r\n") {
			t.Fatalf("left %q", rest)
		}
	})
}
