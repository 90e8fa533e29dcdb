package main

import (
	"fmt"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"plateau/acquire/api"
	"plateau/analysis/units"
	"plateau/config"
)

func init() { register(newEnterCmd) }

func newEnterCmd() *cobra.Command {
	var confirm bool
	var device string
	cmd := &cobra.Command{
		Use:   "enter VALUE [UNIT]",
		Short: "Enter the reading of an analog dial for the current step",
		Long: `enter hands the daemon the value you read off the dial of the device under
test when the run asks for it ('plateau tail' shows the request). Without a
unit the reading is taken in the device's configured unit. A decimal comma
(4,02) and negative readings (-0.1) are fine.

When the run calibrates several dials, --device names the dial the reading
is for (its instrument name, as 'plateau tail' and 'plateau status' show it);
with only one dial it may be left out.

--device also names an ambient instrument read by a person (role: ambient,
link kind manual): a room thermometer, a hygrometer, a barometer. Its reading
is in its own unit without one, or in a unit of its quantity (23.4 °C, 52 %RH,
1013.2 hPa); it stands for the points of the next half hour.

The daemon refuses a reading when no step waits for one, and a reading that
looks wrong (outside the dial's range, or far from the step's target) until
you give it again with --confirm.`,
		Example: `  plateau enter 4.02
  plateau enter 4,02 bar
  plateau enter -0.1
  plateau enter 58.5psi
  plateau enter --confirm 17.2
  plateau enter --device dial-3 4.02
  plateau enter --device room 23.4 °C
  plateau enter --device humidity 52 %RH`,
		Args: cobra.ArbitraryArgs, // counted in RunE, once flags are parsed
		// Flags are parsed in RunE, after the readings are set aside:
		// "-0.1" is a reading, not a flag.
		DisableFlagParsing: true,
	}
	df := addDaemonFlags(cmd)
	cmd.Flags().BoolVar(&confirm, "confirm", false, "take a reading the daemon found implausible")
	cmd.Flags().StringVar(&device, "device", "", "the dial the reading is for, when the run has several (its instrument name)")
	cmd.RunE = func(cmd *cobra.Command, raw []string) error {
		args, flags := splitReadings(raw)
		cmd.DisableFlagParsing = false
		if err := cmd.ParseFlags(flags); err != nil {
			return fmt.Errorf("enter: %w", err)
		}
		if help, _ := cmd.Flags().GetBool("help"); help {
			return cmd.Help()
		}
		args = append(args, cmd.Flags().Args()...)
		if len(args) < 1 || len(args) > 2 {
			return fmt.Errorf("enter: give the reading and, if it is not in the device's unit, the unit: plateau enter 4.02 bar")
		}
		text := strings.Join(args, " ")
		c, err := df.client(cmd)
		if err != nil {
			return err
		}
		parse, own := parseDialEntry, ""
		if device != "" {
			a, ambient, err := ambientFor(cmd, c, device)
			if err != nil {
				return err
			}
			if ambient {
				parse = func(t string) (dialEntry, error) { return parseAmbientEntry(t, a.Kind) }
				own = a.Unit.Symbol
			}
		}
		e, err := parse(text)
		if err != nil {
			return err
		}
		if e.Unit == "" {
			e.Unit = own
		}
		if e.Unit == "" {
			st, err := c.Status(cmd.Context())
			if err != nil {
				return err
			}
			if st.Unit == "" {
				return fmt.Errorf("reading %q has no unit and the device has none configured: add one, e.g. plateau enter %s bar", text, args[0])
			}
			e.Unit = st.Unit
		}
		if err := c.Enter(cmd.Context(), api.Entry{Device: device, Value: e.Value, Unit: e.Unit, Confirm: confirm}); err != nil {
			again := "plateau enter" + prefixed(" --device ", device)
			switch {
			case api.IsStatus(err, 409) && !confirm && strings.Contains(err.Error(), "confirm"):
				return fmt.Errorf("%w\nto take it as it is: %s --confirm %s", err, again, text)
			case device == "" && strings.Contains(err.Error(), "several dials"):
				return fmt.Errorf("%w\nname the dial: plateau enter --device NAME %s", err, text)
			}
			return err
		}
		fmt.Fprintf(cmd.OutOrStdout(), "taken%s: %s %s\n", prefixed(" for ", device), strconv.FormatFloat(e.Value, 'f', -1, 64), e.Unit)
		return nil
	}
	return cmd
}

// ambientFor finds the ambient instrument an entry names: in the
// configuration, which knows its unit before any reading and whether a
// person reads it, else as the daemon's status describes it. False for a
// name that is no ambient instrument (a dial's).
func ambientFor(cmd *cobra.Command, c *api.Client, name string) (config.AmbientInstrument, bool, error) {
	if cfg, err := config.Load(configPath); err == nil {
		for _, in := range cfg.Instruments {
			a, ok := config.AmbientOf(in)
			switch {
			case in.Name != name || in.Role != config.RoleAmbient:
				continue
			case !ok:
				return a, false, fmt.Errorf("%s: its quantity %q or unit %q cannot be read: plateau check says why", name, in.Quantity, in.Unit)
			case in.Link.Kind != config.LinkManual:
				return a, false, fmt.Errorf("%s is read over its link (%s): there is nothing to type in; only an ambient instrument with link kind manual takes plateau enter", name, in.Link.Kind)
			}
			return a, true, nil
		}
	}
	st, err := c.Status(cmd.Context())
	if err != nil {
		return config.AmbientInstrument{}, false, err
	}
	for _, in := range st.Instruments {
		if in.Name != name || in.Role != api.RoleAmbient {
			continue
		}
		u, err := units.LookupAmbient(units.AmbientKind(in.Quantity), in.RawUnit)
		if err != nil { // no reading yet tells what it reads
			return config.AmbientInstrument{}, false, fmt.Errorf("%s is an ambient instrument with no reading yet, and %s does not describe it: give the daemon's configuration with -c", name, configPath)
		}
		return config.AmbientInstrument{Name: name, Kind: u.Kind, Unit: u}, true, nil
	}
	return config.AmbientInstrument{}, false, nil
}

// splitReadings sets aside the arguments that are readings (numbers,
// negative ones too) from the flags.
func splitReadings(raw []string) (readings, flags []string) {
	for i := 0; i < len(raw); i++ {
		a := raw[i]
		switch {
		case a == "--":
			return append(readings, raw[i+1:]...), flags
		case len(a) > 1 && a[0] == '-' && (a[1] >= '0' && a[1] <= '9' || a[1] == '.' || a[1] == ','):
			readings = append(readings, a)
		default:
			flags = append(flags, a)
		}
	}
	return readings, flags
}
