package main

import (
	"fmt"
	"io"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"plateau/acquire/api"
	"plateau/analysis"
)

func init() { register(newRunsCmd) }

func newRunsCmd() *cobra.Command {
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "runs [RUN]",
		Short: "List the runs in the store, or show one run and its points",
		Long: `runs lists every run the daemon has stored, oldest first. With a run id
(r000042, 42 or "last") it shows that run and its captured points.`,
		Args: cobra.MaximumNArgs(1),
	}
	df := addDaemonFlags(cmd)
	cmd.Flags().BoolVar(&asJSON, "json", false, "print JSON")
	cmd.RunE = func(cmd *cobra.Command, args []string) error {
		c, err := df.client(cmd)
		if err != nil {
			return err
		}
		out := cmd.OutOrStdout()
		if len(args) == 0 {
			runs, err := c.Runs(cmd.Context())
			if err != nil {
				return err
			}
			if asJSON {
				return printJSON(out, runs)
			}
			printRuns(out, runs)
			return nil
		}
		run, err := c.Run(cmd.Context(), args[0])
		if err != nil {
			return err
		}
		pts, err := c.Points(cmd.Context(), run.ID)
		if err != nil {
			return err
		}
		if asJSON {
			return printJSON(out, map[string]any{"run": run, "points": pts})
		}
		st, err := c.Status(cmd.Context())
		if err != nil {
			return err
		}
		printRun(out, run, pts, st.Unit)
		return nil
	}
	return cmd
}

const timeLayout = "2006-01-02 15:04"

func printRuns(w io.Writer, runs []api.RunInfo) {
	if len(runs) == 0 {
		fmt.Fprintln(w, "no runs yet; start one with: plateau start")
		return
	}
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "RUN\tSTATE\tCREATED\tLAST CHANGE\tLABEL\tREASON")
	for _, r := range runs {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\n", r.ID, r.State, r.Created.Local().Format(timeLayout),
			r.Updated.Local().Format(timeLayout), r.Label, r.Reason)
	}
	tw.Flush()
}

func printRun(w io.Writer, r api.RunDetail, pts []analysis.Point, unit string) {
	show := displayUnit(unit)
	fmt.Fprintf(w, "run       %s %q\nstate     %s (%s)\ncreated   %s\nchanged   %s\npoints    %d\n",
		r.ID, r.Label, r.State, r.Reason, r.Created.Local().Format(time.RFC3339), r.Updated.Local().Format(time.RFC3339), r.Points)
	if len(pts) == 0 {
		return
	}
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "CYCLE\tSERIES\tKIND\tNOMINAL %[1]s\tREFERENCE %[1]s\tDEVICE %[1]s\tDEVICE − REF %[1]s\t\n", show.Symbol)
	for _, p := range pts {
		fmt.Fprintf(tw, "%d\t%s\t%s\t%.6g\t%.6g\t%.6g\t%+.4g\t\n", p.Cycle, p.Direction, p.Kind,
			show.FromPa(p.Nominal), show.FromPa(p.Reference.Mean), show.FromPa(p.DUT.Mean), show.FromPa(p.DUT.Mean-p.Reference.Mean))
	}
	tw.Flush()
}
