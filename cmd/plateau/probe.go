package main

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"os/signal"
	"sort"
	"time"

	"github.com/spf13/cobra"
	"gonum.org/v1/gonum/stat"

	"plateau/analysis/readout"
	"plateau/config"
	"plateau/drivers"
	_ "plateau/drivers/all"
	"plateau/drivers/clock"
)

func init() { register(newProbeCmd) }

func newProbeCmd() *cobra.Command {
	var (
		reads    int
		interval time.Duration
		verbose  bool
		unit     string
	)
	cmd := &cobra.Command{
		Use:   "probe NAME",
		Short: "Read one configured instrument a few times and show what comes back",
		Long: `probe opens the instrument NAME from the configuration file, reads it -n
times and prints every reading in the instrument's own unit and in the unit of
the device under test, with the raw register words or reply line. It ends with
the read rate, mean, standard deviation and the failed reads by reason. It only
reads: it never writes a setpoint. Use -v to log each request and reply.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			cfg, err := config.Load(configPath)
			if err != nil {
				return err
			}
			inst, err := findInstrument(cfg, args[0])
			if err != nil {
				return err
			}
			if inst.Role == config.RoleSource {
				return fmt.Errorf("instrument %q is a pressure source; probe reads gauges only", inst.Name)
			}
			if inst.Link.Kind == config.LinkManual {
				return fmt.Errorf("instrument %q is read by an operator; there is nothing to probe", inst.Name)
			}
			if reads < 1 {
				return fmt.Errorf("-n %d: give at least one read", reads)
			}
			if !cmd.Flags().Changed("interval") && inst.Poll > 0 {
				interval = inst.Poll
			}
			show, err := displayFor(cfg.Device, unit)
			if err != nil {
				return err
			}
			if inst.Role == config.RoleReference {
				show.res = cfg.Reference.ResolutionPa
			}
			level := slog.LevelWarn
			if verbose {
				level = slog.LevelDebug
			}
			env := drivers.OpenEnv{
				Log:   slog.New(slog.NewTextHandler(cmd.ErrOrStderr(), &slog.HandlerOptions{Level: level})),
				Clock: clock.Wall{},
			}
			g, err := drivers.OpenGauge(inst, env)
			if err != nil {
				return err
			}
			defer g.Close()
			ctx, stop := signal.NotifyContext(cmd.Context(), os.Interrupt)
			defer stop()
			return probe(ctx, cmd, g, reads, interval, show)
		},
	}
	cmd.Flags().IntVarP(&reads, "reads", "n", 10, "number of reads")
	cmd.Flags().DurationVarP(&interval, "interval", "i", 0, "pause between reads (default: the instrument's poll interval)")
	cmd.Flags().BoolVarP(&verbose, "verbose", "v", false, "log every request, raw reply and reconnect on stderr")
	cmd.Flags().StringVar(&unit, "unit", "", "show readings in this unit (default: the device's)")
	return cmd
}

func findInstrument(cfg *config.Config, name string) (config.Instrument, error) {
	var names []string
	for _, in := range cfg.Instruments {
		if in.Name == name {
			return in, nil
		}
		names = append(names, in.Name)
	}
	sort.Strings(names)
	return config.Instrument{}, fmt.Errorf("no instrument %q in %s (configured: %v)", name, cfg.File, names)
}

func probe(ctx context.Context, cmd *cobra.Command, g drivers.Gauge, reads int, interval time.Duration, show display) error {
	out := cmd.OutOrStdout()
	var values []float64 // Pa
	failed := map[drivers.Kind]int{}
	fmt.Fprintf(out, "%4s  %-12s  %21s  %21s  %s\n", "#", "time", "as read", "in "+show.unit.Symbol, "raw words or reply line")
	start := time.Now()
	for i := 1; i <= reads; i++ {
		if i > 1 && interval > 0 {
			select {
			case <-time.After(interval):
			case <-ctx.Done():
			}
		}
		if ctx.Err() != nil {
			break
		}
		r, err := g.Read(ctx)
		if err != nil {
			failed[drivers.KindOf(err)]++
			fmt.Fprintf(out, "%4d  %s  failed: %v\n", i, time.Now().Format("15:04:05.000"), err)
			continue
		}
		values = append(values, r.Pa)
		fmt.Fprintf(out, "%4d  %s  %14s %-6s  %14s %-6s  %s\n", i, r.Time.Format("15:04:05.000"),
			readout.Plain(r.Raw, 0), r.RawUnit, show.one(r.Pa), show.unit.Symbol, r.Wire)
	}
	elapsed := time.Since(start)
	attempts := len(values)
	for _, n := range failed {
		attempts += n
	}
	fmt.Fprintf(out, "\n%d of %d reads good in %s (%.1f good reads/s)\n", len(values), attempts,
		elapsed.Round(time.Millisecond), float64(len(values))/elapsed.Seconds())
	if len(values) > 0 {
		mean, sd := stat.MeanStdDev(values, nil)
		if len(values) < 2 {
			sd = 0
		}
		fmt.Fprintf(out, "mean %s, standard deviation %s %s\n", readout.MeanWithUnit(mean, show.unit, show.res),
			readout.Mean(sd, show.unit, show.res), show.unit.Symbol)
	}
	for k := drivers.Kind(0); k <= drivers.KindOverload; k++ {
		if n := failed[k]; n > 0 {
			fmt.Fprintf(out, "failed (%s): %d\n", kindName(k), n)
		}
	}
	if len(values) == 0 {
		return errors.New("no good reading")
	}
	return nil
}

func kindName(k drivers.Kind) string {
	if k == 0 {
		return "other"
	}
	return k.String()
}
