package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"plateau/config"
)

func init() { register(newCheckCmd) }

func newCheckCmd() *cobra.Command {
	return &cobra.Command{
		Use:   "check",
		Short: "Validate the configuration file and summarise what it describes",
		Long: `check reads the configuration file, applies defaults and PLATEAU_* environment
overrides, and reports every problem at once with its line and key. It exits
non-zero when anything is wrong.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			cfg, err := config.Load(configPath)
			if err != nil {
				return err
			}
			out := cmd.OutOrStdout()
			d := cfg.Device
			fmt.Fprintf(out, "%s: OK\n", cfg.File)
			fmt.Fprintf(out, "  device under test  %s, %s … %s, resolution %s\n", orDash(d.ID), d.Lower, d.Upper, d.Resolution)
			fmt.Fprintf(out, "  reference          %s, U = %s of reading + %s (k = %g)\n", orDash(cfg.Reference.ID), cfg.Reference.Uncertainty, cfg.Reference.Floor, cfg.Reference.Coverage)
			for _, in := range cfg.Instruments {
				fmt.Fprintf(out, "  instrument         %-12s %-9s %s %s\n", in.Name, in.Role, in.Link.Kind, in.Link.Address)
			}
			p := cfg.Procedure
			fmt.Fprintf(out, "  procedure          %s: %d points × %d cycles, %d exercise cycles, decision rule %s\n",
				p.Mode, len(p.PointsPa), p.Cycles, p.Exercise, p.Decision)
			fmt.Fprintf(out, "  store              %s\n", cfg.Store.Path)
			return nil
		},
	}
}

func orDash(s string) string {
	if s == "" {
		return "—"
	}
	return s
}
