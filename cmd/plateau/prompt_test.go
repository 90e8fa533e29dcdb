package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/creack/pty"

	"plateau/analysis"
	"plateau/analysis/units"
)

func TestParseDialEntry(t *testing.T) {
	cases := []struct {
		in    string
		value float64
		unit  string
		err   string
	}{
		{"4.05", 4.05, "", ""},
		{"4,05", 4.05, "", ""},
		{" -0.1 ", -0.1, "", ""},
		{"-0,1", -0.1, "", ""},
		{"4.05 bar", 4.05, "bar", ""},
		{"4,05 bar", 4.05, "bar", ""},
		{"58.5psi", 58.5, "psi", ""},
		{"", 0, "", "empty"},
		{"4.0x", 0, "", "reading \"4.0x\""},
		{"1,234.5", 0, "", "one decimal separator"},
		{"50 %", 0, "", "not a percentage"},
		{"NaN", 0, "", "not a finite number"},
		{"4 furlongs", 0, "", "unknown pressure unit"},
	}
	for _, c := range cases {
		checkEntry(t, c.in, c.value, c.unit, c.err, parseDialEntry)
	}
}

// checkEntry runs parse on what an operator typed: the value and unit
// wanted, or an error containing err.
func checkEntry(t *testing.T, in string, value float64, unit, err string, parse func(string) (dialEntry, error)) {
	t.Run(in, func(t *testing.T) {
		e, got := parse(in)
		if err != "" {
			if got == nil || !strings.Contains(got.Error(), err) {
				t.Fatalf("error %v, want one containing %q", got, err)
			}
			return
		}
		if got != nil || e.Value != value || e.Unit != unit {
			t.Fatalf("got %+v, %v; want %g %q", e, got, value, unit)
		}
	})
}

func FuzzParseDialEntry(f *testing.F) {
	for _, s := range []string{"4.05", "4,05", "-0.1", "58.5psi", "1e3 bar", "", ",", "-", "4,05,06"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		e, err := parseDialEntry(s)
		if err == nil && (e.Value != e.Value || e.Value > 1e308 || e.Value < -1e308) {
			t.Fatalf("%q gave a non-finite reading %v", s, e.Value)
		}
	})
}

// What an operator types for an ambient instrument: a number in its own
// unit, or one of its quantity's units (spelt as people write them), with
// a decimal comma too; a unit of another quantity is refused, never read
// as the instrument's own.
func TestParseAmbientEntry(t *testing.T) {
	cases := []struct {
		in    string
		kind  units.AmbientKind
		value float64
		unit  string
		err   string
	}{
		{"23.4 °C", units.Temperature, 23.4, "°C", ""},
		{"23,4°C", units.Temperature, 23.4, "°C", ""},
		{"-2.5 degC", units.Temperature, -2.5, "°C", ""},
		{"74.1 °F", units.Temperature, 74.1, "°F", ""},
		{"296.55 K", units.Temperature, 296.55, "K", ""},
		{"23.4", units.Temperature, 23.4, "", ""},
		{"52 %RH", units.Humidity, 52, "%RH", ""},
		{"52%", units.Humidity, 52, "%RH", ""},
		{"1013,2 hPa", units.Barometric, 1013.2, "hPa", ""},
		{"29.92 inHg", units.Barometric, 29.92, "inHg", ""},
		{"52 °C", units.Humidity, 0, "", `unknown humidity unit "°C"`},
		{"23.4 %RH", units.Temperature, 0, "", `unknown temperature unit "%RH"`},
		{"1013 psig", units.Barometric, 0, "", "reads absolute pressure"},
		{"warm", units.Temperature, 0, "", "does not start with a number"},
		{"1,013.2 hPa", units.Barometric, 0, "", "one decimal separator"},
		{"", units.Humidity, 0, "", "empty"},
	}
	for _, c := range cases {
		checkEntry(t, c.in, c.value, c.unit, c.err, func(s string) (dialEntry, error) { return parseAmbientEntry(s, c.kind) })
	}
}

func FuzzParseAmbientEntry(f *testing.F) {
	for _, s := range []string{"23.4 °C", "52%RH", "1013,2 hPa", "-", ",", "1e3 K", "+-1 °F"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		for _, k := range []units.AmbientKind{units.Temperature, units.Humidity, units.Barometric} {
			e, err := parseAmbientEntry(s, k)
			if err == nil && (e.Value != e.Value || e.Value > 1e308 || e.Value < -1e308) {
				t.Fatalf("%q gave a non-finite reading %v", s, e.Value)
			}
		}
	})
}

// plateau run on the simulated reference and source with a dial read by a
// person, typed through a pseudo-terminal: every step prompts, a mistyped
// value is corrected before it is taken, an implausible one asks for
// confirmation, and the run's points hold the readings as typed.
func TestRunPromptsForDial(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the program and runs a procedure")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "dial",
		"    link: {kind: sim}\n    sim_part: device\n    sim_via: modbus-rtu\n    poll: 100ms\n", "    link: {kind: manual}\n    unit: bar\n",
		"points: [0 %, 20 %, 40 %, 60 %, 80 %, 100 %]", "points: [0 %, 50 %, 100 %]",
		"cycles: 2", "cycles: 1", "exercise: 1", "exercise: 0",
		"window: 10s", "window: 3s", "timeout: 5m", "timeout: 60m", "top_hold: 20s", "top_hold: 2s", "hold: 5s", "hold: 1s")
	term, exited := onTerminal(t, bin, "--config", cfgPath, "run", "--label", "dial test")
	prompt := regexp.MustCompile(`set (-?[0-9.]+) bar, read the dial: `)
	var typed []float64 // the readings taken, in order
	for n := 0; ; n++ {
		m, err := term.expect(prompt, exited, 60*time.Second)
		if errors.Is(err, errExited) {
			break
		}
		if err != nil {
			t.Fatalf("prompt %d: %v", n+1, err)
		}
		target, _ := strconv.ParseFloat(m[1], 64)
		want := target
		switch n {
		case 0: // a slip of the finger, corrected before it is taken
			term.send("9.99")
			term.must(t, `9\.99 bar: press Enter to take it, or type the right reading: `, exited)
			term.send(m[1])
			term.must(t, ` bar: press Enter to take it`, exited)
		case 1: // far from the target: asked, confirmed
			want = target + 0.9
			term.send(strconv.FormatFloat(want, 'f', 2, 64))
			term.must(t, `press Enter to take it`, exited)
			term.send("")
			term.must(t, `looks wrong: .*\.\s+take it anyway\? \[y/N\] `, exited)
			term.send("y")
			term.must(t, `taken \(confirmed\) for dut: `, exited)
			typed = append(typed, want)
			continue
		case 2: // a decimal comma
			term.send(strings.Replace(m[1], ".", ",", 1))
			term.must(t, `press Enter to take it`, exited)
		default:
			term.send(m[1])
			term.must(t, `press Enter to take it`, exited)
		}
		term.send("")
		term.must(t, `taken for dut: `, exited)
		typed = append(typed, want)
	}
	if err := <-exited; err != nil {
		t.Fatalf("run: %v\n%s", err, term.text())
	}
	if len(typed) < 3 {
		t.Fatalf("only %d prompts:\n%s", len(typed), term.text())
	}
	// The daemon is not running: runs reads the store itself.
	out, err := exec.Command(bin, "--config", cfgPath, "runs", "last", "--json").CombinedOutput()
	if err != nil {
		t.Fatalf("runs last: %v\n%s", err, out)
	}
	var got struct {
		Run    struct{ State string }
		Points []analysis.Point
	}
	if err := json.Unmarshal(out, &got); err != nil {
		t.Fatalf("%v\n%s", err, out)
	}
	if got.Run.State != "finished" || len(got.Points) != len(typed) {
		t.Fatalf("run %s with %d points, want finished with %d:\n%s", got.Run.State, len(got.Points), len(typed), out)
	}
	for i, p := range got.Points {
		if diff := p.DUT.Mean - typed[i]*1e5; diff > 1e-6 || diff < -1e-6 {
			t.Errorf("point %d: device %g Pa, typed %g bar", i+1, p.DUT.Mean, typed[i])
		}
	}
}

var errExited = errors.New("the program exited")

// onTerminal runs bin with args on a new pseudo-terminal, as a person at
// a terminal would; exited delivers how it ended. The program is killed
// and the terminal closed when the test ends.
func onTerminal(t *testing.T, bin string, args ...string) (term *terminal, exited <-chan error) {
	t.Helper()
	ptmx, tty, err := pty.Open()
	if err != nil {
		t.Skipf("no pseudo-terminals: %v", err)
	}
	t.Cleanup(func() { ptmx.Close() })
	cmd := exec.Command(bin, args...)
	cmd.Stdin, cmd.Stdout, cmd.Stderr = tty, tty, tty
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	tty.Close()
	done := make(chan error, 1)
	go func() { done <- cmd.Wait() }()
	t.Cleanup(func() { cmd.Process.Kill() })
	return newTerminal(ptmx), done
}

// terminal is the far side of a pseudo-terminal: what the program wrote,
// read as it comes, and what a person types.
type terminal struct {
	w    io.Writer
	got  chan string
	buf  strings.Builder // everything read
	seen int             // how much of buf earlier expectations used
}

func newTerminal(ptmx *os.File) *terminal {
	t := &terminal{w: ptmx, got: make(chan string, 64)}
	go func() {
		r := bufio.NewReader(ptmx)
		b := make([]byte, 4096)
		for {
			n, err := r.Read(b)
			if n > 0 {
				t.got <- string(b[:n])
			}
			if err != nil {
				close(t.got)
				return
			}
		}
	}()
	return t
}

func (t *terminal) send(line string) { fmt.Fprint(t.w, line+"\r") }

func (t *terminal) text() string { return t.buf.String() }

// expect waits for re in what the program wrote after the last match.
func (t *terminal) expect(re *regexp.Regexp, exited <-chan error, limit time.Duration) ([]string, error) {
	deadline := time.After(limit)
	for {
		rest := t.buf.String()[t.seen:]
		if loc := re.FindStringSubmatchIndex(rest); loc != nil {
			m := make([]string, len(loc)/2)
			for i := range m {
				if loc[2*i] >= 0 {
					m[i] = rest[loc[2*i]:loc[2*i+1]]
				}
			}
			t.seen += loc[1]
			return m, nil
		}
		select {
		case s, ok := <-t.got:
			if !ok {
				return nil, errExited
			}
			t.buf.WriteString(s)
		case <-deadline:
			return nil, fmt.Errorf("no %q within %s; the terminal shows:\n%s", re, limit, rest)
		}
	}
}

func (t *terminal) must(tb testing.TB, pattern string, exited <-chan error) {
	tb.Helper()
	if _, err := t.expect(regexp.MustCompile(pattern), exited, 30*time.Second); err != nil {
		tb.Fatal(err)
	}
}
