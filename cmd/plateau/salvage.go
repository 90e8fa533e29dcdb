package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"plateau/acquire/store"
)

func init() { register(newSalvageCmd) }

func newSalvageCmd() *cobra.Command {
	var path string
	cmd := &cobra.Command{
		Use:   "salvage NEW-FILE",
		Short: "Copy what can still be read out of a damaged store into a new store",
		Long: `salvage walks the pages of a damaged store itself, without trusting them,
and copies every run, point, event and sample block that still reads and
matches its checksum into NEW-FILE, a new store that passes the full check.
It lists what it had to leave behind. The damaged file is only read; keep it
until the new store has been looked at. A run whose own record was lost is
stored as failed, with whatever points and samples of it were saved.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			p, err := existingStore("salvage", path)
			if err != nil {
				return err
			}
			rep, err := store.Salvage(p, args[0])
			if err != nil {
				return err
			}
			out := cmd.OutOrStdout()
			fmt.Fprintf(out, "wrote %s: %s (%d rebuilt), %s, %s, %s\n", args[0], counted(rep.Runs, "run"), rep.RunsRebuilt,
				counted(rep.Points, "point"), counted(rep.Events, "event"), counted(rep.Blocks, "sample block"))
			if len(rep.Lost) == 0 {
				fmt.Fprintln(out, "nothing was left behind")
				return nil
			}
			fmt.Fprintf(out, "left behind (%d):\n", len(rep.Lost))
			for _, l := range rep.Lost {
				fmt.Fprintf(out, "  %s\n", l)
			}
			return nil
		},
	}
	cmd.Flags().StringVar(&path, "store", "", "the damaged store file (default: store.path of the configuration)")
	return cmd
}
