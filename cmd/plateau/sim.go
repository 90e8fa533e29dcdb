package main

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"strings"
	"syscall"

	"github.com/spf13/cobra"

	"plateau/config"
	"plateau/drivers/clock"
	"plateau/drivers/sim"
)

func init() { register(newSimCmd) }

func newSimCmd() *cobra.Command {
	var (
		seed     int64
		speed    float64
		kind     string
		tcp      string
		faults   []string
		writeTo  string
		showRegs bool
		devices  int
	)
	cmd := &cobra.Command{
		Use:   "sim",
		Short: "Run a simulated comparison bench on loopback Modbus TCP and pseudo-terminals",
		Long: `sim starts a simulated bench — a pressure source, a reference transducer and a
device under test with known errors — served over a Modbus TCP server on
loopback, a Modbus RTU slave and two line instruments on pseudo-terminals.
It prints where each is reachable and a ready-to-use configuration (as YAML,
with everything else as # comments, so the output can be saved as a file),
then runs until interrupted.

The simulator settings come from the simulator: section of --config when that
flag is given, otherwise from built-in defaults; the flags below override them.
Try it:
  plateau sim --write sim.yaml &
  plateau -c sim.yaml probe sim-reference`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			var s config.Simulator
			fl := cmd.Flags()
			fromFile := fl.Changed("config")
			if fromFile {
				cfg, err := config.Load(configPath)
				if err != nil {
					return err
				}
				s = cfg.Simulator
			}
			s = sim.WithDefaults(s)
			// Flags override the file; without a file their defaults apply.
			if !fromFile || fl.Changed("seed") {
				s.Seed = seed
			}
			if !fromFile || fl.Changed("speed") {
				s.Speed = speed
			}
			if !fromFile || fl.Changed("device-kind") {
				s.Device.Kind = kind
			}
			if fl.Changed("devices") {
				if devices < 1 || devices > maxDemoDevices {
					return fmt.Errorf("--devices %d: from 1 to %d simulated devices", devices, maxDemoDevices)
				}
				s.Devices = simDevices(devices, s.Device)
			}
			for _, f := range faults {
				if err := sim.SetFault(&s.Faults, f); err != nil {
					return err
				}
			}
			ctx, stop := signal.NotifyContext(cmd.Context(), os.Interrupt, syscall.SIGTERM)
			defer stop()
			return runSim(ctx, s, tcp, writeTo, showRegs, cmd.OutOrStdout(), cmd.ErrOrStderr())
		},
	}
	f := cmd.Flags()
	f.Int64Var(&seed, "seed", 1, "random seed: the same seed gives the same noise and faults")
	f.Float64Var(&speed, "speed", 1, "run the simulated physics this many times faster than real time")
	f.StringVar(&kind, "device-kind", "digital", "device under test: digital, transmitter (4–20 mA) or dial")
	f.StringVar(&tcp, "tcp", "127.0.0.1:0", "address of the Modbus TCP server (port 0 picks a free port)")
	f.StringArrayVar(&faults, "fault", nil, "switch a fault on, e.g. drop=0.05, bad_crc=0.02, link_down=5s,link_every=60s (repeatable; names: "+strings.Join(sim.FaultNames, ", ")+")")
	f.StringVar(&writeTo, "write", "", "also write the configuration to this file")
	f.BoolVar(&showRegs, "registers", true, "print the register map")
	f.IntVar(&devices, "devices", 1, fmt.Sprintf("simulate this many devices under test on the one RTU line, each with the demo's invented errors (1 to %d; replaces simulator.devices)", maxDemoDevices))
	return cmd
}

// simDevices is n simulated devices named sim-device-1 … with the demo's
// invented errors; with one, the one device of simulator.device as always.
// What the demo's table leaves to the kind (the range, the unit) comes
// from the template.
func simDevices(n int, template config.SimDevice) []config.SimUnit {
	if n <= 1 {
		return nil
	}
	out := make([]config.SimUnit, n)
	for i := range out {
		d := demoDevices[i]
		u := template
		u.Kind, u.Zero, u.Span, u.Nonlinearity, u.DeadBand, u.Resolution, u.Noise = d.kind, d.zero, d.span, d.bow, d.deadBand, d.resolution, d.noise
		out[i] = config.SimUnit{Instrument: fmt.Sprintf("sim-device-%d", i+1), SimDevice: u}
	}
	return out
}

// runSim starts the rig, prints what a user needs and serves until ctx ends.
func runSim(ctx context.Context, s config.Simulator, tcp, writeTo string, showRegs bool, out, errOut io.Writer) error {
	log := slog.New(slog.NewTextHandler(errOut, &slog.HandlerOptions{Level: slog.LevelInfo}))
	var clk clock.Clock = clock.Wall{}
	if s.Speed != 1 {
		clk = clock.NewScaled(s.Speed)
	}
	rig, err := sim.New(s, clk, sim.WithLogger(log), sim.WithTCPAddress(tcp))
	if err != nil {
		return err
	}
	ep, err := rig.Start(ctx)
	if err != nil {
		return err
	}
	defer rig.Stop()
	text, err := rig.ConfigYAML()
	if err != nil {
		return err
	}
	if writeTo != "" {
		if err := os.WriteFile(writeTo, []byte(text), 0o644); err != nil {
			return fmt.Errorf("write configuration: %w", err)
		}
	}
	fmt.Fprint(out, simBanner(rig, ep, writeTo, showRegs))
	fmt.Fprint(out, text)
	fmt.Fprintln(out, "# running; stop with Ctrl-C")
	if f, ok := out.(*os.File); ok {
		f.Sync() // a redirected stdout gets the whole configuration now, not at exit
	}
	<-ctx.Done()
	fmt.Fprintln(errOut, "simulated bench stopped")
	return nil
}

func wireTimed(s config.Simulator) string {
	if s.RTU.WireTime {
		return ", replies at the wire's pace"
	}
	return ""
}

// simBanner is the human part of the output, as YAML comments.
func simBanner(rig *sim.Rig, ep sim.Endpoints, writeTo string, showRegs bool) string {
	s := rig.Settings()
	var b strings.Builder
	line := func(format string, a ...any) { fmt.Fprintf(&b, "# "+format+"\n", a...) }
	if len(s.Devices) > 1 {
		line("plateau simulated bench — seed %d, speed ×%g, %d devices under test", s.Seed, s.Speed, len(s.Devices))
	} else {
		line("plateau simulated bench — seed %d, speed ×%g, device: %s %s … %s", s.Seed, s.Speed, s.Device.Kind, s.Device.Lower, s.Device.Upper)
	}
	line("A simulator: no real pressure. On a real bench never exceed a gauge's range, vent before")
	line("disconnecting and keep oxygen gauges oil-free; 'plateau run' shows the full safety notice.")
	line("")
	if len(ep.Devices) > 1 {
		line("Modbus TCP        %s (the reference and source at any unit id, each device at its own)", ep.TCP)
		line("Modbus RTU        %s (units %d–%d, one per device, %d baud 8E1 timing%s)", ep.RTU,
			ep.Devices[0].UnitID, ep.Devices[len(ep.Devices)-1].UnitID, ep.RTUBaud, wireTimed(s))
		line("reference line    %s (send %q, CR LF)", ep.ReferenceLine, sim.CmdRead)
		for _, d := range ep.Devices {
			line("%-17s unit %d, line %s (%s)", d.Instrument, d.UnitID, d.Line, d.Kind)
		}
	} else {
		line("Modbus TCP        %s (any unit id)", ep.TCP)
		line("Modbus RTU        %s (unit %d, %d baud 8E1 timing%s)", ep.RTU, ep.UnitID, ep.RTUBaud, wireTimed(s))
		line("reference line    %s (send %q, CR LF)", ep.ReferenceLine, sim.CmdRead)
		line("device line       %s (send %q, CR LF)", ep.DeviceLine, sim.CmdRead)
	}
	if writeTo != "" {
		line("configuration written to %s", writeTo)
	}
	if showRegs {
		line("")
		line("Register map (0-based wire addresses; mbpoll -r counts from 1):")
		for _, l := range strings.Split(strings.TrimRight(sim.MapText(ep.Registers), "\n"), "\n") {
			line("  %s", l)
		}
	}
	line("")
	line("Configuration for this bench:")
	return b.String()
}
