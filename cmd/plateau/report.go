package main

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"plateau/analysis/report"
)

func init() { register(newReportCmd) }

// reportFormats are the renderings of a run's report.
var reportFormats = []string{"text", "html", "csv", "json"}

func newReportCmd() *cobra.Command {
	var format, output, device string
	cmd := &cobra.Command{
		Use:   "report RUN",
		Short: "Write a run's report as text, HTML, CSV or JSON",
		Long: `report writes the report of a run (r000042, 42 or "last") to the file named
by -o, or to standard output. The format comes from --format, or else from the
file's extension (.txt, .html, .csv, .json); on standard output it is text.
It asks the daemon when one answers, and otherwise reads the store itself.

A run of several devices is reported whole: the text and the HTML document
open with a table of every device, then give each device's report; CSV and
JSON name the device of every row. --device NAME reports one device alone.`,
		Example: `  plateau report last
  plateau report r000042 -o PG-0421.html
  plateau report last --device pt-3 -o pt-3.html
  plateau report last --format json | jq .result.verdict`,
		Args: cobra.ExactArgs(1),
	}
	rf := addRecordFlags(cmd)
	cmd.Flags().StringVar(&format, "format", "", "text, html, csv or json (default: from the -o extension; text on standard output)")
	cmd.Flags().StringVarP(&output, "output", "o", "-", "file to write; - for standard output")
	cmd.Flags().StringVar(&device, "device", "", "report this device of a run of several (its instrument name); default: every device")
	cmd.RunE = func(cmd *cobra.Command, args []string) error {
		f, err := reportFormat(format, output)
		if err != nil {
			return err
		}
		src, err := rf.open(cmd)
		if err != nil {
			return err
		}
		defer src.Close()
		write := func(w io.Writer) error { return src.Report(cmd.Context(), args[0], f, device, w) }
		if output == "-" {
			return write(cmd.OutOrStdout())
		}
		if err := writeWhole(output, write); err != nil {
			return err
		}
		fmt.Fprintf(cmd.ErrOrStderr(), "wrote %s\n", output)
		return nil
	}
	return cmd
}

// reportFormat is --format, else the format the output file's extension
// names, else text for standard output.
func reportFormat(flag, output string) (string, error) {
	f := strings.ToLower(flag)
	if f == "" {
		if output == "-" {
			return "text", nil
		}
		ext := strings.TrimPrefix(strings.ToLower(filepath.Ext(output)), ".")
		switch ext {
		case "htm":
			ext = "html"
		case "txt":
			ext = "text"
		}
		f = ext
		if f == "" {
			return "", fmt.Errorf("-o %s: give --format %s, or a file name ending in .txt, .html, .csv or .json", output, strings.Join(reportFormats, ", "))
		}
	}
	for _, k := range reportFormats {
		if f == k {
			return f, nil
		}
	}
	if flag == "" {
		return "", fmt.Errorf("-o %s: the extension names no report format; use .txt, .html, .csv or .json, or give --format", output)
	}
	return "", fmt.Errorf("--format %q: use %s", flag, strings.Join(reportFormats, ", "))
}

// renderReport writes a run's evaluation, every device of it, in one of
// reportFormats.
func renderReport(w io.Writer, format string, r *runResult) error {
	switch format {
	case "html":
		return report.HTMLDevices(w, r.Devices)
	case "csv":
		return report.CSVDevices(w, r.Devices)
	case "json":
		return report.JSONDevices(w, r.Devices)
	case "text":
		return report.TextDevices(w, r.Devices)
	}
	return fmt.Errorf("report format %q: use %s", format, strings.Join(reportFormats, ", "))
}

// writeWhole writes a file through a temporary one beside it, renamed into
// place only when complete: a failed write never leaves half a file where
// a good one was.
func writeWhole(path string, write func(io.Writer) error) error {
	tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*")
	if err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	defer os.Remove(tmp.Name())
	if err := write(tmp); err != nil {
		tmp.Close()
		return err
	}
	if err := tmp.Close(); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err := os.Chmod(tmp.Name(), 0o644); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return nil
}
