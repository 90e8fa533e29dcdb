package main

import (
	"fmt"
	"os"
	"os/signal"
	"path/filepath"
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

func newDemoCmd() *cobra.Command {
	var dir string
	var seed int64
	var speed float64
	cmd := &cobra.Command{
		Use:   "demo",
		Short: "Calibrate a simulated 0–16 bar gauge end to end, no hardware needed",
		Long: `demo starts the simulated bench over its real transports (Modbus TCP on
loopback, a serial line instrument on a pseudo-terminal), runs a complete
calibration of an invented 0–16 bar process gauge — one exercise cycle, two
cycles of ascending and descending series over six points, zero readings
before and after — on an accelerated clock, writes the store, the
configuration and the HTML report to a folder, and prints the result table.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if dir == "" {
				dir = "plateau-demo-" + time.Now().Format("20060102-150405")
			}
			if err := os.MkdirAll(dir, 0o755); err != nil {
				return fmt.Errorf("demo folder: %w", err)
			}
			abs, _ := filepath.Abs(dir)
			cfgPath := filepath.Join(abs, "plateau.yaml")
			text := fmt.Sprintf(demoConfig, filepath.Join(abs, "plateau.db"), filepath.Join(abs, "plateau.sock"), seed, speed)
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
	return cmd
}
