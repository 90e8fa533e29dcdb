package main

import (
	"bytes"
	"context"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/simonvetter/modbus"

	"plateau/acquire/api"
	model "plateau/analysis/balance"
	"plateau/analysis/report"
	"plateau/analysis/units"
	"plateau/config"
	"plateau/drivers/balance"
)

// The simulated transmitter of the process test (invented errors, a
// scenario of our own): zero and span errors only, so that its error at a
// pressure p is exactly zero + span·p before its resolution and noise.
const loadRunSimulator = `simulator:
  seed: 7
  speed: 1
  source: {time_constant: 300ms, leak: 0 Pa}
  device: {zero: 0.03 bar, span: 0.15 %, nonlinearity: 0 bar, dead_band: 0 bar, resolution: 0.0001 bar, noise: 0.0002 bar}
`

const (
	loadRunZeroPa = 3000   // 0.03 bar
	loadRunSpan   = 0.0015 // 0.15 %
	pistonTempC   = 21.3
)

// A whole run with the pressure balance as the reference, as processes and
// as a technician works it: plateau sim serves a 4–20 mA transmitter
// (Modbus TCP on loopback), plateau serve runs with the balance as the
// reference and the transmitter as the device, plateau start starts the run,
// and at each step the operator asks plateau load what to load, puts the
// weights on (here: the simulated line is brought to the pressure the
// floating piston makes, as the operator's pump does), and says so with
// plateau load PIECES --temperature. The run completes; plateau report's
// errors in mA are the simulated truth, and its reference uncertainty is the
// balance's own budget.
func TestLoadRunWithBalance(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a calibration as three processes")
	}
	bin := plateauBinary(t)
	dir := t.TempDir()

	// The simulator, from a configuration of its own.
	simSrc := strings.Replace(readFile(filepath.Join(mustWd(t), "../../testdata/config/sim.yaml")),
		"simulator:\n  seed: 42\n  speed: 20\n", loadRunSimulator, 1)
	if !strings.Contains(simSrc, "span: 0.15 %") {
		t.Fatal("the simulator section of sim.yaml changed")
	}
	simDir := filepath.Join(dir, "sim")
	if err := os.Mkdir(simDir, 0o755); err != nil {
		t.Fatal(err)
	}
	simCfg := filepath.Join(simDir, "source.yaml")
	if err := os.WriteFile(simCfg, []byte(simSrc), 0o644); err != nil {
		t.Fatal(err)
	}
	written := startSim(t, bin, simDir, "-c", simCfg, "--device-kind", "transmitter")
	m := regexp.MustCompile(`address: (127\.0\.0\.1:\d+)`).FindStringSubmatch(readFile(written))
	if m == nil {
		t.Fatalf("no Modbus TCP address in the simulator's configuration:\n%s", readFile(written))
	}
	tcp := m[1]

	cfgPath := filepath.Join(dir, "balance.yaml")
	yaml := strings.NewReplacer(
		"  path: plateau-balance.db", "  path: "+filepath.Join(dir, "balance.db"),
		"  socket: plateau-balance.sock", "  socket: "+filepath.Join(dir, "balance.sock"),
		"    link: {kind: balance, address: plateau-balance.loading}\n",
		"    link: {kind: balance, address: plateau-balance.loading}\n    poll: 100ms\n",
		"      masses_correlated: true\n",
		"      masses_correlated: true\n      loadings: [vent, P1+M1+M2+M3, P1+M1+M2+M3+M4+M5]\n",
		"  - name: dial\n    role: device\n    link: {kind: manual}\n    unit: bar\n",
		"  - name: pt\n    role: device\n    link: {kind: modbus-tcp, address: \""+tcp+"\"}\n    unit: mA\n    poll: 100ms\n"+
			"    value: {table: input, register: 4, type: float32, word_order: BADC}\n"+
			"    current_loop: {enabled: true, lower: 0 bar, upper: 16 bar}\n",
		"  id: DIAL-16\n  kind: dial\n", "  id: PT-16\n  kind: transmitter\n",
		"  resolution: 0.05 bar\n  class: \"1\"\n  medium: oil\n", "  resolution: 0.001 bar\n  limit: {span: 0.5 %}\n  medium: oil\n",
		"  coverage: 2\nhead:", "  coverage: 2\n  loop_meter: {uncertainty: 0.01 %, floor: 0.001 mA, resolution: 0.0001 mA}\nhead:",
		"  device_height: 1.10", "  device_height: 0.90", // the transmitter at the piston's level
		"  points: [0 %, 25 %, 50 %, 75 %, 100 %]\n", "  points: [0 %, 50 %, 100 %]\n",
		"  decision: simple\n", "  decision: simple\n  exercise: 0\n  hold: 1s\n  timeout: 2m\n  settle: {window: 3s, min_count: 10, band: 1 %}\n"+
			"safety:\n  max_pressure: 16.5 bar\n",
	).Replace(readFile(filepath.Join(mustWd(t), "../../testdata/config/balance.yaml")))
	if err := os.WriteFile(cfgPath, []byte(yaml), 0o644); err != nil {
		t.Fatal(err)
	}
	if out, err := exec.Command(bin, "check", "-c", cfgPath).CombinedOutput(); err != nil {
		t.Fatalf("check: %v\n%s", err, out)
	}
	cfg, err := config.Load(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	bal := cfg.ReferenceBalance()

	// The operator's pump: the simulated controller's setpoint is the line
	// pressure, its vent opens the line.
	pump, err := modbus.NewClient(&modbus.ClientConfiguration{URL: "tcp://" + tcp, Timeout: 2 * time.Second})
	if err != nil {
		t.Fatal(err)
	}
	if err := pump.Open(); err != nil {
		t.Fatal(err)
	}
	defer pump.Close()
	if err := pump.SetEncoding(modbus.BIG_ENDIAN, modbus.HIGH_WORD_FIRST); err != nil {
		t.Fatal(err)
	}

	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Minute)
	defer cancel()
	d := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "serve.log"))
	c := api.NewUnixClient(filepath.Join(dir, "balance.sock"), "")
	waitReady(t, ctx, c)

	plateau := func(args ...string) (string, string) {
		t.Helper()
		cmd := exec.CommandContext(ctx, bin, append(args, "-c", cfgPath)...)
		var stdout, stderr bytes.Buffer
		cmd.Stdout, cmd.Stderr = &stdout, &stderr
		if err := cmd.Run(); err != nil {
			t.Fatalf("plateau %s: %v\n%s%s\nserve log:\n%s", strings.Join(args, " "), err, stdout.String(), stderr.String(), readFile(filepath.Join(dir, "serve.log")))
		}
		return stdout.String(), stderr.String()
	}
	out, _ := plateau("start", "--label", "balance")
	id := regexp.MustCompile(`run (r\d+) started`).FindStringSubmatch(out)
	if id == nil {
		t.Fatalf("start said %q", out)
	}

	asked := regexp.MustCompile(`^step \d+ of \d+: (?:load (\S+) \(≈ [0-9.]+ bar\), float the piston, then: plateau load (\S+) --temperature …|(vent) the balance \(0 bar\), then: plateau load --vent)\n$`)
	steps := 0
	for lastStep := -1; ; {
		st, err := c.Status(ctx)
		if err != nil {
			out, _ := exec.Command(bin, "status", "-c", cfgPath).CombinedOutput()
			t.Fatalf("%v\n%s\nserve log:\n%s", err, out, tail(readFile(filepath.Join(dir, "serve.log")), 40))
		}
		if st.Run == nil {
			if st.Last == nil || st.Last.State != "finished" {
				t.Fatalf("the run ended: %+v", st.Last)
			}
			break
		}
		if st.Current == nil || st.Current.Index == lastStep {
			time.Sleep(50 * time.Millisecond)
			continue
		}
		lastStep = st.Current.Index
		steps++
		t.Logf("step %d of %d: target %.0f Pa (%s)", lastStep+1, st.Current.Of, st.Current.TargetPa, st.Step)
		// What the step asks for, as the operator asks it.
		out, _ := plateau("load")
		m := asked.FindStringSubmatch(out)
		if m == nil {
			t.Fatalf("plateau load at step %d said %q", lastStep+1, out)
		}
		pieces := m[1]
		if m[3] != "" {
			if err := pump.WriteCoil(0, true); err != nil {
				t.Fatal(err)
			}
			if _, stderr := plateau("load", "--vent"); stderr != "" {
				t.Errorf("load --vent warned: %s", stderr)
			}
			continue
		}
		if m[2] != pieces {
			t.Errorf("plateau load at step %d said %q", lastStep+1, out)
		}
		ids, err := model.ParseLoading(pieces)
		if err != nil {
			t.Fatal(err)
		}
		cond := bal.LevelConditions()
		cond.Loaded, cond.PistonTempC = ids, pistonTempC
		r, err := bal.Setup().Pressure(cond)
		if err != nil {
			t.Fatal(err)
		}
		if err := pump.WriteFloat32(100, float32(r.LevelPa/1e5)); err != nil {
			t.Fatal(err)
		}
		out, stderr := plateau("load", pieces, "--temperature", "21.3")
		if !strings.Contains(out, pieces+" at 21.3 °C: ") {
			t.Errorf("load %s said %q", pieces, out)
		}
		// The cautions of every command that drives a pressure, and no
		// warning: the loading is the plan's.
		if !strings.Contains(stderr, safetyNotice) || strings.Contains(stderr, "warning") {
			t.Errorf("load %s, standard error:\n%s", pieces, stderr)
		}
	}
	// 0, 8, 16 bar up and 16, 8, 0 bar down.
	if steps < 5 {
		t.Errorf("%d steps, want at least 5", steps)
	}

	out, _ = plateau("report", id[1], "--format", "json")
	stopDaemon(t, d)
	reports, err := report.ReadJSON(strings.NewReader(out))
	if err != nil || len(reports) != 1 || reports[0].Result.Output == nil {
		t.Fatalf("report: %v\n%s", err, out)
	}
	res := reports[0].Result
	results, err := bal.PlannedResults()
	if err != nil {
		t.Fatal(err)
	}
	pct, floor := model.Cover(results, 2)
	if len(res.Points) != 3 {
		t.Fatalf("%d points, want 3", len(res.Points))
	}
	for i, p := range res.Output.Points {
		// The truth: the transmitter's zero and span errors at the balance's
		// pressure, on the output: 16 mA over 16 bar.
		want := 16 * (loadRunZeroPa + loadRunSpan*p.AppliedPa) / 16e5
		// Its resolution (0.0001 bar) and noise (0.0002 bar), averaged over
		// the window, are within 0.0003 bar = 0.0003 mA.
		t.Logf("point at %.0f Pa: error %.5f mA, truth %.5f mA", p.AppliedPa, p.ErrorMA, want)
		if math.Abs(p.ErrorMA-want) > 0.0003 {
			t.Errorf("point at %.0f Pa: error %.5f mA, want %.5f mA", p.AppliedPa, p.ErrorMA, want)
		}
		// The reference's line in the budget is the balance's own (k = 2).
		pr := res.Points[i]
		for _, b := range pr.Budget {
			if b.Name != "reference" {
				continue
			}
			if u := (pct/100*math.Abs(pr.ReferenceMeanPa) + floor) / 2; math.Abs(b.StandardUncertaintyPa-u) > 1e-6*u+1e-9 {
				t.Errorf("point at %.0f Pa: the reference's standard uncertainty is %.4f Pa, the balance's budget gives %.4f Pa", pr.ReferenceMeanPa, b.StandardUncertaintyPa, u)
			}
		}
	}
	if t.Failed() {
		t.Logf("report:\n%s\nserve log:\n%s", out, readFile(filepath.Join(dir, "serve.log")))
	}
}

// tail is the last n lines of s.
func tail(s string, n int) string {
	lines := strings.Split(s, "\n")
	if len(lines) > n {
		lines = lines[len(lines)-n:]
	}
	return strings.Join(lines, "\n")
}

// What plateau load tells the operator, and when a loading is the plan's.
func TestPlannedLoadingHint(t *testing.T) {
	bar, _ := units.Lookup("bar")
	for _, tc := range []struct {
		s    stepLoading
		want string
	}{
		{stepLoading{planned: "P1+M1+M2", targetPa: 4e5, unit: bar, res: 1e3}, "load P1+M1+M2 (≈ 4.00 bar)"},
		{stepLoading{planned: config.Vent, unit: bar}, "vent the balance (0 bar)"},
	} {
		if got := tc.s.hint(); got != tc.want {
			t.Errorf("hint %q, want %q", got, tc.want)
		}
	}
	for _, tc := range []struct {
		planned string
		l       balance.Loading
		same    bool
	}{
		{"P1+M1+M2", balance.Loading{Pieces: []string{"P1", "M2", "M1"}}, true},
		{"P1+M1+M2", balance.Loading{Pieces: []string{"P1", "M1"}}, false},
		{"P1+M1", balance.Loading{Pieces: []string{"P1", "M2"}}, false},
		{config.Vent, balance.Loading{Vented: true}, true},
		{config.Vent, balance.Loading{Pieces: []string{"P1"}}, false},
		{"P1", balance.Loading{Vented: true}, false},
	} {
		if got := samePieces(tc.planned, tc.l); got != tc.same {
			t.Errorf("samePieces(%q, %s) = %v", tc.planned, tc.l.Text(), got)
		}
	}
}

// With a piston thermometer in the configuration, plateau load needs no
// --temperature: the run reads it; the safety limit is still checked.
func TestLoadWithPistonThermometer(t *testing.T) {
	dir := t.TempDir()
	cfg := filepath.Join(dir, "balance.yaml")
	yaml := strings.NewReplacer(
		"      piston_temperature_uncertainty: 0.2\n", "      piston_temperature_uncertainty: 0.2\n      piston_thermometer: piston\n",
		"device:\n", "  - name: piston\n    role: ambient\n    quantity: temperature\n    unit: °C\n    uncertainty: 0.1 K\n    link: {kind: manual}\ndevice:\n",
	).Replace(readFile(filepath.Join(mustWd(t), "../../testdata/config/balance.yaml")))
	if err := os.WriteFile(cfg, []byte(yaml), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := runPlateau(t, "load", "-c", cfg, "P1+M1+M2")
	if err != nil || !strings.Contains(out, "(the run takes the piston temperature from piston)") {
		t.Fatalf("load: %v\n%s", err, out)
	}
	if b := readFile(filepath.Join(dir, "plateau-balance.loading")); b != "# plateau loading\nloading P1+M1+M2\n" {
		t.Errorf("loading file %q", b)
	}
}
