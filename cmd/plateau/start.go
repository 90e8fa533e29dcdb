package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"plateau/acquire"
	"plateau/acquire/api"
	"plateau/config"
)

func init() { register(newStartCmd) }

func newStartCmd() *cobra.Command {
	var label string
	var cert acquire.CertificateFields
	cmd := &cobra.Command{
		Use:   "start",
		Short: "Ask the daemon to start a calibration run",
		Long: `start asks the running daemon ('plateau serve') to begin a new run of the
configured procedure and prints its id. Follow it with 'plateau tail'.`,
		Args: cobra.NoArgs,
	}
	df := addDaemonFlags(cmd)
	cmd.Flags().StringVar(&label, "label", "", `a label for the run, e.g. "as-found PG-0421" or the work order`)
	addCertificateFlags(cmd, &cert)
	cmd.RunE = func(cmd *cobra.Command, _ []string) error {
		c, err := df.client(cmd)
		if err != nil {
			return err
		}
		showCautions(cmd)
		id, err := c.Start(cmd.Context(), api.StartRequest{Label: label, Certificate: cert.Number, Customer: cert.Customer, Operator: cert.Operator})
		if err != nil {
			return err
		}
		out := cmd.OutOrStdout()
		if st, err := c.Status(cmd.Context()); err == nil && st.ExpectedSeconds > 0 {
			fmt.Fprintf(out, "run %s started: %d steps, %s\n", id, len(st.Plan), expectedText(st))
		} else {
			fmt.Fprintf(out, "run %s started\n", id)
		}
		fmt.Fprintf(out, "follow it with: plateau tail --run %s, or plateau status\n", id)
		return nil
	}
	return cmd
}

// showCautions prints the safety notice before a call that makes the daemon
// drive its pressure source. The daemon's configuration may not be readable
// here; only when it is and it names no source are the cautions left out.
func showCautions(cmd *cobra.Command) {
	if cfg, err := config.Load(configPath); err != nil || hasSource(cfg) {
		fmt.Fprintln(cmd.ErrOrStderr(), safetyNotice)
	}
}

// addCertificateFlags adds the flags that give one run its own certificate
// fields in place of the configuration's certificate section.
func addCertificateFlags(cmd *cobra.Command, cert *acquire.CertificateFields) {
	cmd.Flags().StringVar(&cert.Number, "certificate", "", "this run's certificate number (instead of certificate.number)")
	cmd.Flags().StringVar(&cert.Customer, "customer", "", "this run's customer (instead of certificate.customer)")
	cmd.Flags().StringVar(&cert.Operator, "operator", "", "who performs this run (instead of certificate.operator)")
}
