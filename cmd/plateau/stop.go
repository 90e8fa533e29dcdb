package main

import (
	"context"
	"fmt"

	"github.com/spf13/cobra"

	"plateau/acquire/api"
)

func init() {
	register(newStopCmd)
	register(newPauseCmd)
	register(newResumeCmd)
}

func newStopCmd() *cobra.Command {
	var reason string
	cmd := &cobra.Command{
		Use:   "stop",
		Short: "End the current run for good (the pressure source is vented)",
		Args:  cobra.NoArgs,
	}
	df := addDaemonFlags(cmd)
	cmd.Flags().StringVar(&reason, "reason", "", "why the run is stopped, kept with the run")
	cmd.RunE = func(cmd *cobra.Command, _ []string) error {
		return runControl(cmd, df, "stopped", func(c *api.Client, ctx context.Context) error { return c.Stop(ctx, reason) })
	}
	return cmd
}

func newPauseCmd() *cobra.Command {
	cmd := &cobra.Command{
		Use:   "pause",
		Short: "Hold the current run at its step; 'plateau resume' carries it on",
		Args:  cobra.NoArgs,
	}
	df := addDaemonFlags(cmd)
	cmd.RunE = func(cmd *cobra.Command, _ []string) error {
		c, err := df.client(cmd)
		if err != nil {
			return err
		}
		if err := c.Pause(cmd.Context()); err != nil {
			return err
		}
		st, err := c.Status(cmd.Context())
		if err != nil {
			fmt.Fprintln(cmd.OutOrStdout(), "run paused")
			return err
		}
		show, err := statusDisplay(st.Unit, "")
		if err != nil {
			return err
		}
		fmt.Fprintln(cmd.OutOrStdout(), pausedText(st, show))
		return nil
	}
	return cmd
}

func newResumeCmd() *cobra.Command {
	cmd := &cobra.Command{
		Use:   "resume",
		Short: "Carry on a paused run",
		Args:  cobra.NoArgs,
	}
	df := addDaemonFlags(cmd)
	cmd.RunE = func(cmd *cobra.Command, _ []string) error {
		showCautions(cmd) // resuming approaches the step's pressure again
		return runControl(cmd, df, "resumed", (*api.Client).Resume)
	}
	return cmd
}

// runControl makes one control call and says what became of the run.
func runControl(cmd *cobra.Command, df *daemonFlags, done string, call func(*api.Client, context.Context) error) error {
	c, err := df.client(cmd)
	if err != nil {
		return err
	}
	if err := call(c, cmd.Context()); err != nil {
		return err
	}
	fmt.Fprintf(cmd.OutOrStdout(), "run %s\n", done)
	return nil
}

// pausedText says what became of the run and of the pressure on the bench.
func pausedText(st api.Status, show display) string {
	where := ""
	if cur := st.Current; cur != nil {
		where = fmt.Sprintf(" at step %d of %d", cur.Index+1, cur.Of)
	}
	id := ""
	if st.Run != nil {
		id = " " + st.Run.ID
	}
	switch {
	case st.Trip != "":
		return fmt.Sprintf("run%s paused%s; the pressure is NOT held: the safety guard vented the source (%s)", id, where, st.Trip)
	case !st.Source:
		return fmt.Sprintf("run%s paused%s; plateau drives no pressure source here: the pressure is whatever the bench holds", id, where)
	case !st.Held:
		return fmt.Sprintf("run%s paused%s; the pressure is NOT held: the source was vented (%s)", id, where, st.Reason)
	}
	held := "the pressure is held: the controller keeps its setpoint"
	if cur := st.Current; cur != nil && cur.Phase != "" {
		held += " of " + show.withUnit(cur.TargetPa)
	}
	return fmt.Sprintf("run%s paused%s; %s; 'plateau resume' carries it on, 'plateau stop' vents and ends it", id, where, held)
}
