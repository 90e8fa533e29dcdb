package main

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"plateau/acquire/api"

	model "plateau/analysis/balance"
	"plateau/analysis/readout"
	"plateau/analysis/units"
	"plateau/config"
	"plateau/drivers/balance"
)

func init() { register(newLoadCmd) }

func newLoadCmd() *cobra.Command {
	var (
		temperature string
		vent        bool
	)
	cmd := &cobra.Command{
		Use:   "load PIECES",
		Short: "Say which weights are on the pressure balance that is the reference",
		Long: `load tells plateau which pieces of the mass set are on the piston of the
pressure balance (dead-weight tester) that is the reference: their ids joined
by +, the piston and its carrier included, e.g. P1+M1+M2. plateau works out
the pressure with the pressure-balance equation and the run reads it as the
reference from then on. --vent says the balance is vented (zero gauge
pressure).

Put the weights on and float the piston before you run load: the run takes a
point only when the device under test has settled too. Give the piston
temperature with --temperature unless the configuration enters one for the
run (balance.piston_temperature) or names the ambient thermometer the run
reads it from (balance.piston_thermometer).

When the configuration lists the loading of each planned point
(balance.loadings), plateau load without pieces says what the run's current
step asks for, and a loading that differs from it is written with a warning.

Pressure can hurt: a loaded balance and its lines hold stored energy. Never
load more than the range of the device under test, keep oxygen-service
gauges free of oil (use a gas-operated balance or a separator), vent before
disconnecting anything, and follow local codes and your laboratory's own
procedure.`,
		Example: `  plateau load P1+M1+M2 --temperature 21.3
  plateau load "P1 + M1 + M2 + M3"
  plateau load            # what the current step asks for
  plateau load --vent`,
		Args: cobra.ArbitraryArgs,
	}
	df := addDaemonFlags(cmd)
	cmd.RunE = func(cmd *cobra.Command, args []string) error {
		return runLoad(cmd, df, strings.Join(args, ""), temperature, vent)
	}
	cmd.Flags().StringVar(&temperature, "temperature", "", "piston temperature, °C, e.g. 21.3")
	cmd.Flags().BoolVar(&vent, "vent", false, "the balance is vented: no weights, zero gauge pressure")
	return cmd
}

func runLoad(cmd *cobra.Command, df *daemonFlags, pieces, temperature string, vent bool) error {
	cfg, err := config.Load(configPath)
	if err != nil {
		return err
	}
	var inst *config.Instrument
	for i := range cfg.Instruments {
		if in := &cfg.Instruments[i]; in.Role == config.RoleReference && in.Link.Kind == config.LinkBalance {
			inst = in
		}
	}
	if inst == nil {
		return fmt.Errorf("load: the reference of %s is not a pressure balance (link.kind: balance)", cfg.File)
	}
	b := inst.Balance
	u, err := units.Lookup(inst.Unit)
	if err != nil {
		u = units.Bar
	}
	step := currentStep(cmd, df, cfg, b, u)
	var l balance.Loading
	switch {
	case !vent && strings.TrimSpace(pieces) == "" && temperature == "" && step.planned != "":
		// Only asked: say what the step needs, write nothing.
		then := "float the piston, then: plateau load " + step.planned + " --temperature …"
		if step.planned == config.Vent {
			then = "then: plateau load --vent"
		}
		fmt.Fprintf(cmd.OutOrStdout(), "%s: %s, %s\n", step.where, step.hint(), then)
		return nil
	case vent && (pieces != "" || temperature != ""):
		return errors.New("load: --vent takes no pieces and no temperature")
	case vent:
		l.Vented = true
	default:
		if l.Pieces, err = model.ParseLoading(pieces); err != nil {
			return fmt.Errorf("load: %w", err)
		}
	}
	if temperature != "" {
		t, err := strconv.ParseFloat(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(strings.Replace(temperature, ",", ".", 1)), "°C")), 64)
		if err != nil || math.IsNaN(t) || math.IsInf(t, 0) {
			return fmt.Errorf("load: --temperature %q: give the piston temperature in °C, e.g. 21.3", temperature)
		}
		l.TemperatureC, l.HasTemperature = t, true
	}
	msg := "vented: the reference reads 0"
	if !l.Vented {
		// Work the pressure out here too, so that a piece not in the set or
		// a missing temperature is refused at the terminal.
		c := b.LevelConditions()
		c.Loaded = l.Pieces
		at := ""
		switch {
		case l.HasTemperature:
			c.PistonTempC = l.TemperatureC
		case b.PistonThermometer != "":
			// The run reads the temperature from the thermometer; here the
			// reference temperature is near enough (some ppm per kelvin).
			c.PistonTempC = b.Setup().Piston.RefTempC
			at = " (the run takes the piston temperature from " + b.PistonThermometer + ")"
		case b.PistonTemperature == nil:
			return errors.New("load: give the piston temperature with --temperature (the configuration enters none for the run)")
		}
		r, err := b.Setup().Pressure(c)
		if err != nil {
			return fmt.Errorf("load %s: %w", l.Text(), err)
		}
		// The guard cannot see what a loading does before it is on the
		// piston: refuse one above the limit here.
		if s := cfg.Safety; s.Set && r.LevelPa > s.MaxPressurePa {
			return fmt.Errorf("load %s: %s is above safety.max_pressure (%s): take weights off; never load more than the range of the device under test",
				l.Text(), readout.WithUnit(r.LevelPa, u, r.U), readout.WithUnit(s.MaxPressurePa, u, r.U))
		}
		// Digits to the balance's standard uncertainty.
		msg = fmt.Sprintf("%s at %s °C: %s at the balance's reference level (%s m), standard uncertainty %s", l.Text(),
			strconv.FormatFloat(c.PistonTempC, 'f', -1, 64), readout.WithUnit(r.LevelPa, u, r.U),
			strconv.FormatFloat(b.ReferenceHeight, 'f', -1, 64), readout.WithUnit(r.U, u, r.U/10)) + at
		// Weights on a piston are a pressure source: the same notice as
		// every command that drives one.
		fmt.Fprintln(cmd.ErrOrStderr(), safetyNotice)
	}
	if step.planned != "" && !samePieces(step.planned, l) {
		fmt.Fprintf(cmd.ErrOrStderr(), "warning: %s asks for %s; %s is written as loaded: check the weights on the piston\n", step.where, step.hint(), l.Text())
	}
	if err := balance.WriteLoading(inst.Link.Address, l); err != nil {
		return fmt.Errorf("load: %w", err)
	}
	fmt.Fprintln(cmd.OutOrStdout(), msg)
	return nil
}

// stepLoading is what the run's current step asks to be loaded, when the
// plan lists loadings and a daemon answers; planned is empty otherwise.
type stepLoading struct {
	where    string // "step 3 of 9"
	planned  string // P1+M1+M2, or config.Vent
	targetPa float64
	unit     units.Unit
	res      float64
}

// hint is what the operator is asked to do: "load P1+M1+M2 (≈ 4.00 bar)".
func (s stepLoading) hint() string {
	if s.planned == config.Vent {
		return "vent the balance (0 " + s.unit.Symbol + ")"
	}
	return "load " + s.planned + " (≈ " + readout.WithUnit(s.targetPa, s.unit, s.res) + ")"
}

// currentStep asks the daemon, briefly, for the step its run is at. No
// daemon, no run or no plan of loadings gives nothing: plateau load works
// the same without them.
func currentStep(cmd *cobra.Command, df *daemonFlags, cfg *config.Config, b *config.Balance, u units.Unit) stepLoading {
	if len(b.Planned) == 0 {
		return stepLoading{}
	}
	c, err := df.client(cmd)
	if err != nil {
		return stepLoading{}
	}
	ctx, cancel := context.WithTimeout(cmd.Context(), 2*time.Second)
	defer cancel()
	st, err := c.Status(ctx)
	if err != nil || st.Run == nil || st.Current == nil {
		return stepLoading{}
	}
	return plannedStep(cfg, b, st.Current, u)
}

func plannedStep(cfg *config.Config, b *config.Balance, cur *api.StepNow, u units.Unit) stepLoading {
	planned, ok := b.PlannedLoading(cfg.Procedure, cur.TargetPa)
	if !ok {
		return stepLoading{}
	}
	return stepLoading{where: fmt.Sprintf("step %d of %d", cur.Index+1, cur.Of), planned: planned,
		targetPa: cur.TargetPa, unit: u, res: cfg.Device.ResolutionPa}
}

// samePieces says whether l is the planned loading (the same pieces in any order).
func samePieces(planned string, l balance.Loading) bool {
	if planned == config.Vent || l.Vented {
		return planned == config.Vent && l.Vented
	}
	want, err := model.ParseLoading(planned)
	if err != nil || len(want) != len(l.Pieces) {
		return false
	}
	on := make(map[string]bool, len(l.Pieces))
	for _, id := range l.Pieces {
		on[id] = true
	}
	for _, id := range want {
		if !on[id] {
			return false
		}
	}
	return true
}
