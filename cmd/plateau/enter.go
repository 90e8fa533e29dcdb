package main

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"plateau/acquire/api"
	"plateau/analysis/units"
)

func init() { register(newEnterCmd) }

func newEnterCmd() *cobra.Command {
	cmd := &cobra.Command{
		Use:   "enter VALUE [UNIT]",
		Short: "Enter the reading of an analog dial for the current step",
		Long: `enter hands the daemon the value you read off the dial of the device under
test when the run asks for it ('plateau tail' shows the request). Without a
unit the reading is taken in the device's configured unit.`,
		Example: `  plateau enter 4.02
  plateau enter 4.02 bar
  plateau enter 58.5psi`,
		Args: cobra.RangeArgs(1, 2),
	}
	df := addDaemonFlags(cmd)
	cmd.RunE = func(cmd *cobra.Command, args []string) error {
		c, err := df.client(cmd)
		if err != nil {
			return err
		}
		text := strings.Join(args, " ")
		var e api.Entry
		if v, err := strconv.ParseFloat(strings.TrimSpace(text), 64); err == nil {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("reading %q is not a finite number", text)
			}
			e.Value = v // a bare number: in the device's unit, asked below
		} else {
			q, err := units.ParseQuantity(text)
			if err != nil {
				return fmt.Errorf("reading %q: %w", text, err)
			}
			if q.Percent {
				return fmt.Errorf("reading %q: give a pressure as the dial shows it, not a percentage", text)
			}
			e = api.Entry{Value: q.Value, Unit: q.Unit.Symbol}
		}
		if e.Unit == "" {
			st, err := c.Status(cmd.Context())
			if err != nil {
				return err
			}
			if st.Unit == "" {
				return fmt.Errorf("reading %q has no unit and the device has none configured: add one, e.g. plateau enter %s bar", args[0], args[0])
			}
			e.Unit = st.Unit
		}
		if err := c.Enter(cmd.Context(), e); err != nil {
			return err
		}
		fmt.Fprintf(cmd.OutOrStdout(), "entered %g %s\n", e.Value, e.Unit)
		return nil
	}
	return cmd
}
