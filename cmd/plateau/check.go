package main

import (
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"plateau/acquire"
	"plateau/acquire/procedure"
	"plateau/config"
)

func init() { register(newCheckCmd) }

// checkFound is check's exit status when it finds anything, errors or
// warnings: a script can tell "clean" (0) from "look at this" (2) and from
// check itself failing (1, e.g. the file cannot be read).
const checkFound = 2

func newCheckCmd() *cobra.Command {
	return &cobra.Command{
		Use:   "check",
		Short: "Validate the configuration file and summarise what it describes",
		Long: `check reads the configuration file, applies defaults and PLATEAU_* environment
overrides, and reports every problem at once with its line and key (or the
variable it came from), then what the file describes.

Exit status: 0 when the file is clean, 2 when check found errors or warnings
(an expired reference is a warning here; run and start refuse it), 1 when
the file cannot be read at all.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			out := cmd.OutOrStdout()
			cfg, err := config.Load(configPath)
			if p, ok := config.AsProblems(err); ok {
				fmt.Fprintln(out, p.Error())
				return exitStatus{checkFound}
			}
			if err != nil {
				return err
			}
			if len(cfg.Warnings) > 0 {
				fmt.Fprintf(out, "%d warning(s) in %s:\n", len(cfg.Warnings), cfg.File)
				for _, w := range cfg.Warnings {
					fmt.Fprintf(out, "  %s\n", w)
				}
			} else {
				fmt.Fprintf(out, "%s: OK\n", cfg.File)
			}
			describe(out, cfg)
			if len(cfg.Warnings) > 0 {
				return exitStatus{checkFound}
			}
			return nil
		},
	}
}

// describe prints what the configuration sets up, pressures in fixed
// notation with the digits the device's resolution supports: each
// instrument's mode (gauge or absolute) or, for an ambient one, its
// quantity and unit, and the barometer that converts between modes.
func describe(out io.Writer, cfg *config.Config) {
	for _, dut := range cfg.Devices {
		d := dut.Device
		id := orDash(d.ID)
		if len(cfg.Devices) > 1 {
			id += " (" + dut.Instrument + ")"
		}
		show, _ := displayFor(d, "")
		fmt.Fprintf(out, "  device under test  %s, %s, %s … %s, resolution %s\n", id, orGauge(d.Mode),
			show.withUnit(d.LowerPa), show.withUnit(d.UpperPa), show.withUnit(d.ResolutionPa))
	}
	r := cfg.Reference
	fmt.Fprintf(out, "  reference          %s, U = %s of reading + %s (k = %s)\n", orDash(r.ID), r.Uncertainty, r.Floor,
		strconv.FormatFloat(r.Coverage, 'f', -1, 64))
	if !r.ExpiresAt.IsZero() {
		fmt.Fprintf(out, "  calibrated until   %s\n", r.ExpiresAt.Format("2006-01-02"))
	}
	var converted []string
	for _, in := range cfg.Instruments {
		line := fmt.Sprintf("  instrument         %-12s %-9s %-16s %s %s", in.Name, in.Role, reads(in), in.Link.Kind, in.Link.Address)
		fmt.Fprintln(out, strings.TrimRight(line, " "))
		if cfg.Converted(in) {
			converted = append(converted, fmt.Sprintf("%s (%s)", in.Name, config.InstrumentMode(in)))
		}
	}
	if b, ok := cfg.Barometer(); ok && len(converted) > 0 {
		fmt.Fprintf(out, "  barometer          %s converts %s to the devices' %s pressure, sample by sample\n",
			b.Name, strings.Join(converted, " and "), cfg.BenchMode())
	}
	show, _ := displayFor(cfg.Device, "")
	p := cfg.Procedure
	fmt.Fprintf(out, "  procedure          %s: %d points × %d cycle(s), %d exercise cycle(s), decision rule %s\n",
		p.Mode, len(p.PointsPa), p.Cycles, p.Exercise, p.Decision)
	if len(p.PointsPa) > 0 {
		pts := make([]string, len(p.PointsPa))
		for i, pa := range p.PointsPa {
			pts[i] = show.withUnit(pa)
		}
		fmt.Fprintf(out, "  points             %s\n", strings.Join(pts, ", "))
	}
	if cfg.Safety.Set {
		fmt.Fprintf(out, "  safety limit       %s\n", show.withUnit(cfg.Safety.MaxPressurePa))
	}
	if least, most, ok := runLength(cfg); ok {
		fmt.Fprintf(out, "  duration           at least %s (holds and settle windows), at most %s (every point to its time-out); reaching each pressure comes on top\n",
			roundDuration(least), roundDuration(most))
		if cfg.Simulator.Speed > 1 && usesSimulator(cfg) {
			fmt.Fprintf(out, "                     the simulated bench runs %s× faster: at least %s of wall time\n",
				strconv.FormatFloat(cfg.Simulator.Speed, 'f', -1, 64), roundDuration(time.Duration(float64(least)/cfg.Simulator.Speed)))
		}
	}
	for _, l := range cfg.RTULines() {
		fmt.Fprintf(out, "  RTU line           %s at %d Bd: %d instrument(s), %.1f reads/s asked, about %.1f carried\n",
			l.Address, l.Baud, len(l.Instruments), l.Asked, l.Carried)
	}
	fmt.Fprintf(out, "  store              %s\n", cfg.Store.Path)
}

// runLength bounds how long a planned run takes from its plan
// (acquire.PlanDuration); a free run has no plan to bound.
func runLength(cfg *config.Config) (least, most time.Duration, ok bool) {
	pr := cfg.Procedure
	if pr.Mode != string(procedure.Planned) {
		return 0, 0, false
	}
	steps := procedure.Plan(pr, cfg.Device.LowerPa)
	least, most = acquire.PlanDuration(pr, steps)
	return least, most, len(steps) > 0
}

// roundDuration writes a duration to the second, or to the minute above an hour.
func roundDuration(d time.Duration) string {
	if d >= time.Hour {
		d = d.Round(time.Minute)
	} else {
		d = d.Round(time.Second)
	}
	s := d.String()
	for _, z := range []string{"m0s", "h0m"} {
		s = strings.Replace(s, z, z[:1], 1)
	}
	return s
}

// reads is what an instrument reads: the mode of a pressure instrument
// (a source is set in it), the quantity and unit of an ambient one.
func reads(in config.Instrument) string {
	if a, ok := config.AmbientOf(in); ok {
		return string(a.Kind) + ", " + a.Unit.Symbol
	}
	if in.Role == config.RoleAmbient { // refused by the checks; said as written
		return orDash(in.Quantity)
	}
	return config.InstrumentMode(in)
}

// orGauge is a resolved mode; a device section built in code has none and
// reads gauge pressure.
func orGauge(mode string) string {
	if mode == "" {
		return config.ModeGauge
	}
	return mode
}

func orDash(s string) string {
	if s == "" {
		return "—"
	}
	return s
}
