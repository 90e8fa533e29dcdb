package main

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"
)

func init() { register(newReportCmd) }

func newReportCmd() *cobra.Command {
	var format, output string
	cmd := &cobra.Command{
		Use:   "report RUN",
		Short: "Fetch a run's report from the daemon as HTML, CSV or JSON",
		Long: `report asks the daemon for the report of a run (r000042, 42 or "last") and
writes it to the file named by -o, or to standard output. The format comes
from --format, or else from the file's extension.`,
		Example: `  plateau report r000042 --format html -o PG-0421.html
  plateau report last -o last.csv`,
		Args: cobra.ExactArgs(1),
	}
	df := addDaemonFlags(cmd)
	cmd.Flags().StringVar(&format, "format", "", "html, csv or json (default: from the -o extension)")
	cmd.Flags().StringVarP(&output, "output", "o", "-", "file to write; - for standard output")
	cmd.RunE = func(cmd *cobra.Command, args []string) error {
		if format == "" {
			format = strings.TrimPrefix(strings.ToLower(filepath.Ext(output)), ".")
			if format == "htm" {
				format = "html"
			}
		}
		switch format {
		case "html", "csv", "json":
		case "":
			return fmt.Errorf("give --format html, csv or json (or an -o file name ending in one of them)")
		default:
			return fmt.Errorf("--format %q: use html, csv or json", format)
		}
		c, err := df.client(cmd)
		if err != nil {
			return err
		}
		if output == "-" {
			return c.Report(cmd.Context(), args[0], format, cmd.OutOrStdout())
		}
		// Write beside the target and rename, so a failed fetch never
		// leaves a half report where a good one was.
		tmp, err := os.CreateTemp(filepath.Dir(output), "."+filepath.Base(output)+".*")
		if err != nil {
			return fmt.Errorf("report: %w", err)
		}
		defer os.Remove(tmp.Name())
		if err := c.Report(cmd.Context(), args[0], format, tmp); err != nil {
			tmp.Close()
			return err
		}
		if err := tmp.Close(); err != nil {
			return fmt.Errorf("report: write %s: %w", output, err)
		}
		if err := os.Chmod(tmp.Name(), 0o644); err != nil {
			return fmt.Errorf("report: %w", err)
		}
		if err := os.Rename(tmp.Name(), output); err != nil {
			return fmt.Errorf("report: %w", err)
		}
		fmt.Fprintf(cmd.ErrOrStderr(), "wrote %s\n", output)
		return nil
	}
	return cmd
}
