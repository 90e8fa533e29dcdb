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
		return runControl(cmd, df, "paused", (*api.Client).Pause)
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
