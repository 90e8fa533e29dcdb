package main

import (
	"encoding/csv"
	"fmt"
	"io"
	"slices"
	"strconv"
	"time"

	"github.com/spf13/cobra"

	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/units"
)

func init() { register(newExportCmd) }

func newExportCmd() *cobra.Command {
	var (
		path, output, from, to, unit string
		only                         []string
	)
	cmd := &cobra.Command{
		Use:   "export RUN",
		Short: "Write a run's raw samples as CSV (time, instrument, value, unit, status)",
		Long: `export writes every stored sample of a run (r000042, 42 or "last"), or of a
window of it, as CSV: one row per reading with its time (RFC 3339, UTC), the
instrument, the value and unit as the instrument gave them, and its status
(ok, or why the read failed, with the detail). A loop current in mA outside
the NE 43 measuring band is a good reading with its flag as the status
(saturated, under-range, over-range, failure-low, failure-high) and what the
flag means as the detail. Rows come instrument by instrument, each in time
order; values keep full precision.

export reads the store file itself. While the daemon holds the file, export
from a copy: plateau backup copy.db && plateau export last --store copy.db`,
		Example: `  plateau export last -o last-samples.csv
  plateau export r000042 --instrument ref --from 2026-03-01T21:00:00Z --to 2026-03-01T21:10:00Z
  plateau export last --unit bar`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var window [2]time.Time
			for i, t := range []struct{ flag, value string }{{"--from", from}, {"--to", to}} {
				if t.value == "" {
					continue
				}
				at, err := time.Parse(time.RFC3339Nano, t.value)
				if err != nil {
					return fmt.Errorf("%s %q: give a time such as 2026-03-01T21:04:05Z or 2026-03-01T22:04:05+01:00", t.flag, t.value)
				}
				window[i] = at
			}
			if !window[0].IsZero() && !window[1].IsZero() && window[1].Before(window[0]) {
				return fmt.Errorf("--to %s is before --from %s", to, from)
			}
			var conv *units.Unit
			if unit != "" {
				u, err := units.Lookup(unit)
				if err != nil {
					return fmt.Errorf("--unit: %w", err)
				}
				conv = &u
			}
			p, err := existingStore("export", path)
			if err != nil {
				return err
			}
			st, err := store.Open(p, store.Options{ReadOnly: true, Timeout: 2 * time.Second})
			if err != nil {
				return fmt.Errorf("export: %w (while the daemon holds the store, export from a copy: plateau backup copy.db, then --store copy.db)", err)
			}
			defer st.Close()
			id, err := storeSource{st}.id(args[0])
			if err != nil {
				return fmt.Errorf("export: %w", err)
			}
			names, err := st.Instruments(id)
			if err != nil {
				return fmt.Errorf("export: %w", err)
			}
			for _, o := range only {
				if !slices.Contains(names, o) {
					return fmt.Errorf("export: run %s has no samples of instrument %q (it has %v)", id, o, names)
				}
			}
			if len(only) > 0 {
				names = only
			}
			write := func(w io.Writer) error { return exportSamples(w, st, id, names, window, conv) }
			if output == "" || output == "-" {
				return write(cmd.OutOrStdout())
			}
			if err := writeWhole(output, write); err != nil {
				return err
			}
			fmt.Fprintf(cmd.ErrOrStderr(), "wrote %s\n", output)
			return nil
		},
	}
	cmd.Flags().StringVar(&path, "store", "", "the store file (default: store.path of the configuration)")
	cmd.Flags().StringVarP(&output, "output", "o", "-", "file to write; - for standard output")
	cmd.Flags().StringVar(&from, "from", "", "first time to export (RFC 3339); default the run's start")
	cmd.Flags().StringVar(&to, "to", "", "last time to export (RFC 3339); default the run's end")
	cmd.Flags().StringSliceVar(&only, "instrument", nil, "only these instruments (repeat or separate with commas)")
	cmd.Flags().StringVar(&unit, "unit", "", "write pressures in this unit instead of each instrument's own (a loop current stays in mA)")
	return cmd
}

// exportHeader are the columns of an export.
var exportHeader = []string{"time", "instrument", "value", "unit", "status", "detail"}

// exportSamples writes the samples of the named instruments in the window.
// A pressure is converted to conv when given; other values (a loop
// current) stay as read, a current with its NE 43 flag.
func exportSamples(w io.Writer, st *store.Store, id store.RunID, names []string, window [2]time.Time, conv *units.Unit) error {
	cw := csv.NewWriter(w)
	if err := cw.Write(exportHeader); err != nil {
		return fmt.Errorf("export: %w", err)
	}
	for _, name := range names {
		err := st.Samples(id, name, window[0], window[1], func(s store.Sample) error {
			row := []string{s.Time.UTC().Format(time.RFC3339Nano), name, "", "", "ok", ""}
			switch {
			case s.Failed:
				row[4], row[5] = failureKind(s), s.Message
			case conv != nil && isPressure(s.RawUnit):
				row[2], row[3] = strconv.FormatFloat(conv.FromPa(s.Pa), 'g', -1, 64), conv.Symbol
			default:
				row[2], row[3] = strconv.FormatFloat(s.Raw, 'g', -1, 64), s.RawUnit
			}
			if f := s.Signal(); f != analysis.SignalNone {
				row[4], row[5] = string(f), f.Describe()
			}
			return cw.Write(row)
		})
		if err != nil {
			return fmt.Errorf("export %s of %s: %w", name, id, err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("export: %w", err)
	}
	return nil
}

func failureKind(s store.Sample) string {
	if s.Kind == 0 {
		return "failed"
	}
	return s.Kind.String()
}

func isPressure(symbol string) bool {
	_, err := units.Lookup(symbol)
	return err == nil
}
