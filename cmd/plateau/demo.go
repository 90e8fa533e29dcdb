package main

import (
	"fmt"
	"os"
	"os/signal"
	"path/filepath"
	"strings"
	"syscall"
	"time"

	"github.com/spf13/cobra"

	"plateau/config"
)

func init() { register(newDemoCmd) }

// demoConfig is an invented scenario: a 0–16 bar process gauge of class 1
// compared with a simulated reference transducer, the pressure set by a
// simulated controller, all on an accelerated clock.
const demoConfig = `# plateau demo: an invented 0–16 bar process gauge on the simulated bench.
store:
  path: %[1]s
listen:
  socket: %[2]s
instruments:
  - {name: reference, role: reference, link: {kind: sim}, sim_part: reference, sim_via: modbus-tcp, poll: 100ms}
  - {name: gauge, role: device, link: {kind: sim}, sim_part: device, sim_via: serial, poll: 100ms}
  - {name: controller, role: source, link: {kind: sim}, sim_part: source, sim_via: modbus-tcp}
device:
  id: DEMO-PG16
  manufacturer: (simulated)
  model: process gauge 0–16 bar
  kind: digital
  lower: 0 bar
  upper: 16 bar
  resolution: 0.01 bar
  class: "1"
  medium: nitrogen
reference:
  id: SIM-REF-20
  model: (simulated) reference transducer 0–20 bar
  lower: 0 bar
  upper: 20 bar
  uncertainty: 0.01 %%
  floor: 0.1 mbar
  coverage: 2
procedure:
  points: [0 %%, 20 %%, 40 %%, 60 %%, 80 %%, 100 %%]
  cycles: 2
  exercise: 1
  exercise_hold: 30s
  top_hold: 30s
  hold: 5s
  timeout: 5m
  zero: true
  decision: four-state
  settle: {window: 10s, max_drift: 0.005 bar, max_spread: 0.004 bar, band: 1 %%}
safety:
  max_pressure: 16.5 bar
simulator:
  seed: %[3]d
  speed: %[4]g
`

// maxDemoDevices is the most devices the demo mounts on its manifold.
const maxDemoDevices = 8

// demoDevice is one invented device of the several-device demo and the
// errors the simulator gives it (made up for the demo, not taken from any
// real instrument): each differs in zero, span, bow, friction and noise, so
// the report tells them apart.
type demoDevice struct {
	kind, resolution, class          string
	zero, span, bow, deadBand, noise string
}

var demoDevices = [maxDemoDevices]demoDevice{
	{"digital", "0.01 bar", "1", "0.02 bar", "0.1 %", "0.02 bar", "0.02 bar", "0.002 bar"},
	{"digital", "0.01 bar", "1", "-0.06 bar", "-0.25 %", "0 bar", "0.04 bar", "0.002 bar"},
	{"transmitter", "0.001 bar", "1", "0.01 bar", "0.05 %", "-0.015 bar", "0 bar", "0.001 bar"},
	{"digital", "0.01 bar", "1.6", "0.09 bar", "0.4 %", "0.05 bar", "0.06 bar", "0.003 bar"},
	{"digital", "0.01 bar", "1", "0 bar", "0.15 %", "-0.03 bar", "0.02 bar", "0.002 bar"},
	{"transmitter", "0.001 bar", "1", "-0.02 bar", "0.2 %", "0.01 bar", "0.005 bar", "0.001 bar"},
	{"digital", "0.01 bar", "1.6", "0.15 bar", "-0.1 %", "0.02 bar", "0.08 bar", "0.003 bar"},
	{"digital", "0.01 bar", "1", "-0.01 bar", "0 %", "0.04 bar", "0.01 bar", "0.002 bar"},
}

// demoConfigFor is the demo's configuration with n devices: for one, the
// one-gauge scenario as it always was; for several, the same bench with n
// invented devices side by side on the manifold, each with its own errors:
// the first and the third share one simulated RS-485 line (Modbus RTU, unit
// ids 1 and 3), the others are line instruments of their own. An RTU line
// at 60× real time carries a sixtieth of the reads per clock second it
// carries in real time, so the demo puts only two devices on it, at
// 115 200 Bd: a settling window of 10 s still holds enough readings.
func demoConfigFor(n int, db, sock string, seed int64, speed float64) string {
	text := fmt.Sprintf(demoConfig, db, sock, seed, speed)
	if n <= 1 {
		return text
	}
	var insts, sims strings.Builder
	for i := range n {
		d := demoDevices[i]
		via := "serial"
		if i == 0 || i == 2 {
			via = "modbus-rtu"
		}
		fmt.Fprintf(&insts, "  - {name: gauge-%d, role: device, link: {kind: sim}, sim_part: device, sim_via: %s, poll: 100ms,\n"+
			"     device: {id: DEMO-PG16-%d, kind: %s, resolution: %s, class: %q}}\n", i+1, via, i+1, d.kind, d.resolution, d.class)
		fmt.Fprintf(&sims, "    - {instrument: gauge-%d, zero: %s, span: %s, nonlinearity: %s, dead_band: %s, resolution: %s, noise: %s}\n",
			i+1, d.zero, d.span, d.bow, d.deadBand, d.resolution, d.noise)
	}
	for _, r := range [][2]string{
		{"# plateau demo: an invented 0–16 bar process gauge on the simulated bench.",
			fmt.Sprintf("# plateau demo: %d invented 0–16 bar devices side by side on the simulated bench.", n)},
		{"  - {name: gauge, role: device, link: {kind: sim}, sim_part: device, sim_via: serial, poll: 100ms}\n", insts.String()},
		// What each device's own section gives leaves the shared one.
		{"  id: DEMO-PG16\n", ""}, {"  kind: digital\n", ""}, {"  resolution: 0.01 bar\n  class: \"1\"\n", ""},
	} {
		text = strings.Replace(text, r[0], r[1], 1)
	}
	return text + "  rtu: {baud: 115200}\n  devices:  # each device's invented errors\n" + sims.String()
}

func newDemoCmd() *cobra.Command {
	var dir string
	var seed int64
	var speed float64
	var devices int
	cmd := &cobra.Command{
		Use:   "demo",
		Short: "Calibrate a simulated 0–16 bar gauge end to end, no hardware needed",
		Long: `demo starts the simulated bench over its real transports (Modbus TCP on
loopback, a serial line instrument on a pseudo-terminal), runs a complete
calibration of an invented 0–16 bar process gauge — one exercise cycle, two
cycles of ascending and descending series over six points, zero readings
before and after — on an accelerated clock, writes the store, the
configuration and the HTML report to a folder, and prints the result table.

With --devices N it calibrates N invented devices at once against the one
reference, each with its own errors: two share one simulated RS-485 line
(Modbus RTU, one unit id each), the others are line instruments; the report
opens with a summary of every device.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if devices < 1 || devices > maxDemoDevices {
				return fmt.Errorf("--devices %d: the demo mounts from 1 to %d devices", devices, maxDemoDevices)
			}
			if dir == "" {
				dir = "plateau-demo-" + time.Now().Format("20060102-150405")
			}
			if err := os.MkdirAll(dir, 0o755); err != nil {
				return fmt.Errorf("demo folder: %w", err)
			}
			abs, _ := filepath.Abs(dir)
			cfgPath := filepath.Join(abs, "plateau.yaml")
			text := demoConfigFor(devices, filepath.Join(abs, "plateau.db"), filepath.Join(abs, "plateau.sock"), seed, speed)
			if err := os.WriteFile(cfgPath, []byte(text), 0o644); err != nil {
				return fmt.Errorf("write demo config: %w", err)
			}
			cfg, err := config.Load(cfgPath)
			if err != nil {
				return err
			}
			out := cmd.OutOrStdout()
			fmt.Fprintf(out, "plateau demo: simulated bench, clock %g× real time, folder %s\n", speed, abs)
			ctx, stop := signal.NotifyContext(cmd.Context(), os.Interrupt, syscall.SIGTERM)
			defer stop()
			started := time.Now()
			_, res, err := runOnce(ctx, cfg, "demo", cmd.ErrOrStderr(), true)
			if err != nil {
				return err
			}
			if err := printResult(out, res); err != nil {
				return err
			}
			report := filepath.Join(abs, "report.html")
			if err := writeHTMLReport(report, res); err != nil {
				return err
			}
			fmt.Fprintf(out, "\nreport: %s\nstore:  %s\nconfig: %s\n(%.1f s)\n", report, cfg.Store.Path, cfgPath, time.Since(started).Seconds())
			return nil
		},
	}
	cmd.Flags().StringVar(&dir, "dir", "", "folder for the store, config and report (default plateau-demo-<time>)")
	cmd.Flags().Int64Var(&seed, "seed", 7, "simulator seed: the same seed gives the same run")
	cmd.Flags().Float64Var(&speed, "speed", 60, "how many times faster than real time the simulated bench runs")
	cmd.Flags().IntVar(&devices, "devices", 1, fmt.Sprintf("calibrate this many simulated devices at once, each with its own errors (1 to %d)", maxDemoDevices))
	return cmd
}
